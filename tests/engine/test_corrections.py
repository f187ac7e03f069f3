"""p-value corrections against statsmodels and the Benjamini–Hochberg worked example; each registered
correction's declared properties checked on random p-values; the bootstrap shortcut relying on them."""

from dataclasses import replace

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from epoch_assay.engine.stats import CORRECTIONS, P_VALUE_ADJUSTMENTS, adjust_pvalues, bootstrap_significant_fraction
from epoch_assay.engine.stats import bootstrap as bootstrap_module

# The methods of statsmodels.stats.multitest.multipletests (Seabold & Perktold, 2010), by its names.
STATSMODELS_METHODS = {
    "bonferroni",
    "sidak",
    "holm-sidak",
    "holm",
    "simes-hochberg",
    "hommel",
    "fdr_bh",
    "fdr_by",
    "fdr_tsbh",
    "fdr_tsbky",
}
# Registered p-value adjustments statsmodels has no method for, and why they need none.
NOT_IN_STATSMODELS = {"none": "the identity; checked by test_none_returns_the_pvalues_unchanged"}

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


def test_every_registered_adjustment_is_compared_with_statsmodels_or_says_why_not():
    assert set(P_VALUE_ADJUSTMENTS) <= STATSMODELS_METHODS | set(NOT_IN_STATSMODELS)


@pytest.mark.parametrize("method", sorted(set(P_VALUE_ADJUSTMENTS) & STATSMODELS_METHODS))
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


def uniform_rows(seed: int, shape=(2000, 24)) -> np.ndarray:
    """Rows of p-values, half of them from a strong effect, so that every correction rejects some and keeps some."""
    rng = np.random.default_rng(seed)
    return np.where(rng.random(shape) < 0.5, rng.random(shape) ** 4 * 0.05, rng.random(shape))


@pytest.mark.parametrize("method", [name for name, c in P_VALUE_ADJUSTMENTS.items() if c.monotone])
def test_declared_monotone_corrections_keep_the_order_of_the_raw_pvalues(method):
    p = uniform_rows(5)
    order = np.argsort(p, axis=-1)
    adjusted_in_raw_order = np.take_along_axis(adjust_pvalues(p, method), order, axis=-1)
    assert (np.diff(adjusted_in_raw_order, axis=-1) >= 0).all()


@pytest.mark.parametrize("method", [name for name, c in P_VALUE_ADJUSTMENTS.items() if c.decided_below_alpha])
@pytest.mark.parametrize("alpha", [0.01, 0.05, 0.2])
def test_declared_decided_below_alpha_corrections_ignore_pvalues_above_alpha(method, alpha):
    p = uniform_rows(6)
    significant = adjust_pvalues(p, method) < alpha
    assert not (significant & (p >= alpha)).any()
    raised = np.where(p >= alpha, 1.0, p)
    np.testing.assert_array_equal(adjust_pvalues(raised, method) < alpha, significant)


def test_max_stat_declares_no_property_a_pvalue_shortcut_could_use():
    # Its family-wise p comes from the permutation distribution, not from the raw p-values.
    max_stat = CORRECTIONS["max_stat"]
    assert max_stat.adjust is None and not max_stat.monotone and not max_stat.decided_below_alpha


def test_bootstrap_computes_every_pvalue_for_a_correction_without_the_property(monkeypatch):
    rng = np.random.default_rng(8)
    a, b = rng.standard_normal((30, 16)), rng.standard_normal((30, 16)) + 0.4
    settings = {"resamples": 50, "seed": 1, "alpha": 0.05, "correction": "holm", "trials_per_condition": 20}
    with_shortcut = bootstrap_significant_fraction(a, b, **settings).fractions
    monkeypatch.setitem(CORRECTIONS, "holm", replace(CORRECTIONS["holm"], decided_below_alpha=False))
    monkeypatch.setattr(bootstrap_module, "_pvalues_that_matter", lambda *args: pytest.fail("shortcut taken"))
    without_shortcut = bootstrap_significant_fraction(a, b, **settings).fractions
    # Holm does have the property, so the full computation gives the same fractions.
    np.testing.assert_array_equal(without_shortcut, with_shortcut)
