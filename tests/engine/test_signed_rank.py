"""The vectorised Wilcoxon signed-rank p-value equals scipy.stats.wilcoxon's (Virtanen et al., 2020) in each of its paths."""

import numpy as np
import pytest
from scipy import stats

from epoch_assay.engine.stats.signed_rank import wilcoxon_p


def tied_differences(rng: np.random.Generator, n: int) -> np.ndarray:
    """Differences of significant fractions over 34 channels: multiples of 1/34, with ties and zeros."""
    return rng.integers(-4, 6, size=n) / 34


@pytest.mark.parametrize("n", range(2, 14))
def test_with_ties_or_zeros_up_to_13_subjects_it_equals_scipys_exact_sign_flip_test(n):
    rng = np.random.default_rng(n)
    for _ in range(20):
        differences = tied_differences(rng, n)
        if not np.any(differences):
            continue
        # Reference: scipy.stats.wilcoxon, default arguments (its permutation path for these inputs).
        assert wilcoxon_p(differences) == pytest.approx(stats.wilcoxon(differences).pvalue, rel=1e-12)


@pytest.mark.parametrize("n", [5, 12, 14, 30])
def test_without_ties_and_above_13_subjects_it_is_scipys_value(n):
    rng = np.random.default_rng(100 + n)
    for differences in (rng.normal(size=n), tied_differences(rng, n)):
        if np.any(differences):
            assert wilcoxon_p(differences) == stats.wilcoxon(differences).pvalue
