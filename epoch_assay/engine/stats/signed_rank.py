"""Wilcoxon signed-rank test of paired differences across subjects, with the exact sign-flip null
enumerated at once where scipy would enumerate it one sign pattern at a time.

``scipy.stats.wilcoxon`` (Virtanen et al., 2020; scipy 1.13 and later), with its defaults
(zeros dropped, two-sided, ``method="auto"``), takes the exact distribution of the rank sum when
the differences have neither ties nor zeros, the normal approximation above 13 differences with
ties or zeros, and in between, 13 differences or fewer with ties or zeros, an exact permutation
test over all 2^n sign flips, computing the statistic once per flip in Python. Differences of
significant fractions (shares of a few dozen channels) tie almost always, and a 12-subject run
spends seconds per comparison there. :func:`wilcoxon_p` computes that same exact test with one
matrix product and hands every other case to scipy, so its p-value is scipy's in every case.
"""

import numpy as np
from scipy import stats

EXACT_FLIPS_MAX_N = 13  # scipy's bound: above it, differences with ties or zeros get the normal approximation


def wilcoxon_p(differences: np.ndarray) -> float:
    """Two-sided p-value of ``scipy.stats.wilcoxon(differences)``, differences of shape (n,), not all zero.

    In the sign-flip case the null distribution of the sum of positive ranks (average ranks of
    |d| over the non-zero differences) is enumerated over the 2^m sign patterns of the m non-zero
    differences (flipping a zero changes nothing, so each pattern stands for 2^(n-m) flips), and
    p = 2 min(P(T ≤ observed), P(T ≥ observed)), at most 1, as ``scipy.stats.permutation_test``
    gives for an exact test.
    """
    nonzero = differences[differences != 0]
    magnitudes = np.abs(nonzero)
    tied = np.unique(magnitudes).size < magnitudes.size
    if differences.size > EXACT_FLIPS_MAX_N or not (tied or nonzero.size < differences.size):
        return float(stats.wilcoxon(differences).pvalue)
    ranks = stats.rankdata(magnitudes)
    observed = ranks[nonzero > 0].sum()
    patterns = (np.arange(2**nonzero.size)[:, np.newaxis] >> np.arange(nonzero.size)) & 1
    # Ranks are multiples of 1/2 and their sums exact in floating point: the comparisons need no tolerance.
    null = patterns @ ranks
    return float(min(2.0 * min(np.mean(null <= observed), np.mean(null >= observed)), 1.0))
