"""p-value corrections (Bonferroni, Holm, BH, BY) against statsmodels and the Benjamini–Hochberg worked example."""

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from epoch_assay.engine.stats import adjust_pvalues

# Benjamini & Hochberg (1995), J. R. Stat. Soc. B 57:289–300, section 4 worked example:
# 15 p-values; at q = 0.05 the step-up procedure rejects the four smallest, Bonferroni
# three (values recalled from memory, not re-checked against the printed paper).
BH_1995_EXAMPLE = np.array(
    [
        0.0001,
        0.0004,
        0.0019,
        0.0095,
        0.0201,
        0.0278,
        0.0298,
        0.0344,
        0.0459,
        0.3240,
        0.4262,
        0.5719,
        0.6528,
        0.7590,
        1.000,
    ]
)


def random_pvalues(shape, seed=0):
    rng = np.random.default_rng(seed)
    # Half tiny p-values so that the corrections reject some and keep others.
    return np.where(rng.random(shape) < 0.5, rng.random(shape) * 1e-3, rng.random(shape))


@pytest.mark.parametrize("method", ["bonferroni", "holm", "fdr_bh", "fdr_by"])
def test_matches_statsmodels_multipletests(method):
    p = random_pvalues(64)
    # Reference: statsmodels.stats.multitest.multipletests (Seabold & Perktold, 2010, statsmodels)
    expected = multipletests(p, alpha=0.05, method=method)[1]
    np.testing.assert_allclose(adjust_pvalues(p, method), expected, rtol=1e-12)


def test_bh_rejects_four_smallest_in_1995_worked_example():
    rejected = adjust_pvalues(BH_1995_EXAMPLE, "fdr_bh") < 0.05
    # Benjamini & Hochberg (1995), section 4 (value recalled from memory): four rejections.
    np.testing.assert_array_equal(rejected, np.arange(15) < 4)


def test_bonferroni_rejects_three_smallest_in_1995_worked_example():
    rejected = adjust_pvalues(BH_1995_EXAMPLE, "bonferroni") < 0.05
    # Benjamini & Hochberg (1995), section 4 (value recalled from memory): three rejections.
    np.testing.assert_array_equal(rejected, np.arange(15) < 3)


def test_bh_on_1995_worked_example_matches_statsmodels():
    # Reference: statsmodels.stats.multitest.multipletests(method="fdr_bh") (Seabold & Perktold, 2010)
    expected = multipletests(BH_1995_EXAMPLE, alpha=0.05, method="fdr_bh")[1]
    np.testing.assert_allclose(adjust_pvalues(BH_1995_EXAMPLE, "fdr_bh"), expected, rtol=1e-12)


@pytest.mark.parametrize("method", ["none", "bonferroni", "holm", "fdr_bh", "fdr_by"])
def test_rows_of_2d_input_are_adjusted_independently(method):
    p = random_pvalues((20, 32), seed=1)
    row_by_row = np.array([adjust_pvalues(row, method) for row in p])
    np.testing.assert_array_equal(adjust_pvalues(p, method), row_by_row)


@pytest.mark.parametrize("method", ["bonferroni", "holm", "fdr_bh", "fdr_by"])
def test_nan_stays_nan_and_is_not_counted_as_a_test(method):
    p = random_pvalues(30, seed=2)
    p[[3, 11, 29]] = np.nan
    adjusted = adjust_pvalues(p, method)
    finite = ~np.isnan(p)
    assert np.isnan(adjusted[~finite]).all()
    # Reference: statsmodels multipletests on the 27 defined p-values (Seabold & Perktold, 2010)
    expected = multipletests(p[finite], alpha=0.05, method=method)[1]
    np.testing.assert_allclose(adjusted[finite], expected, rtol=1e-12)


def test_none_returns_the_pvalues_unchanged():
    p = random_pvalues(10, seed=3)
    np.testing.assert_array_equal(adjust_pvalues(p, "none"), p)


def test_unknown_method_is_refused():
    with pytest.raises(ValueError, match="unknown correction"):
        adjust_pvalues(np.array([0.1]), "holm_typo")


@pytest.mark.parametrize("method", ["holm", "fdr_by"])
def test_1995_worked_example_matches_statsmodels(method):
    # Reference: statsmodels.stats.multitest.multipletests (Seabold & Perktold, 2010)
    expected = multipletests(BH_1995_EXAMPLE, alpha=0.05, method=method)[1]
    np.testing.assert_allclose(adjust_pvalues(BH_1995_EXAMPLE, method), expected, rtol=1e-12)


def test_rows_with_different_nan_counts_match_statsmodels_row_by_row():
    p = random_pvalues((3, 12), seed=4)
    p[0, [1, 2]] = np.nan
    p[2, 5] = np.nan
    adjusted = adjust_pvalues(p, "fdr_by")
    for row, expected_row in zip(p, adjusted, strict=False):
        finite = ~np.isnan(row)
        # Reference: statsmodels multipletests(method="fdr_by") on each row's defined p-values (Seabold & Perktold, 2010)
        np.testing.assert_allclose(expected_row[finite], multipletests(row[finite], method="fdr_by")[1], rtol=1e-12)
