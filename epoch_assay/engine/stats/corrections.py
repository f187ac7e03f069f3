"""Multiple-comparison adjustment of p-values across channels.

Each method is one function ``(p, n_tests) -> adjusted`` working along the last axis, so
a (n_resamples, n_channels) array is adjusted row by row without a Python loop. The
max-statistic correction is not an adjustment of p-values: it comes out of the
permutation test itself (``epoch_assay.engine.stats.permutation``).
"""

from collections.abc import Callable
from typing import Literal, get_args

import numpy as np

PValueCorrection = Literal["none", "bonferroni", "holm", "fdr_bh", "fdr_by"]
CorrectionMethod = Literal["none", "bonferroni", "holm", "fdr_bh", "fdr_by", "max_stat"]
P_VALUE_CORRECTIONS: tuple[str, ...] = get_args(PValueCorrection)


def adjust_pvalues(p: np.ndarray, method: PValueCorrection) -> np.ndarray:
    """Adjusted p-values, one family of tests per row.

    Parameters
    ----------
    p : array, shape (..., n_channels), p-values in [0, 1]; NaN for an undefined test
    method : "none", "bonferroni", "holm" (Holm's step-down), "fdr_bh"
        (Benjamini–Hochberg false discovery rate) or "fdr_by" (Benjamini–Yekutieli,
        valid under any dependence between channels)

    Returns
    -------
    array, shape (..., n_channels). NaN p-values stay NaN and are left out of the number
    of tests of their row, as if the channel had not been tested.
    """
    try:
        adjust = _METHODS[method]
    except KeyError:
        raise ValueError(f"unknown correction {method!r}; choose one of {sorted(_METHODS)}") from None
    p = np.asarray(p, dtype=float)
    n_tests = np.count_nonzero(~np.isnan(p), axis=-1, keepdims=True)
    return adjust(p, n_tests)


def _unadjusted(p: np.ndarray, n_tests: np.ndarray) -> np.ndarray:
    return p.copy()


def _bonferroni(p: np.ndarray, n_tests: np.ndarray) -> np.ndarray:
    return np.minimum(p * n_tests, 1.0)


def _sorted(p: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sort order, sorted values and ranks 1..n of each row; argsort puts NaN last."""
    order = np.argsort(p, axis=-1)
    return order, np.take_along_axis(p, order, axis=-1), np.arange(1, p.shape[-1] + 1)


def _unsort(p: np.ndarray, order: np.ndarray, sorted_adjusted: np.ndarray) -> np.ndarray:
    adjusted = np.empty_like(p)
    np.put_along_axis(adjusted, order, np.minimum(sorted_adjusted, 1.0), axis=-1)
    return np.where(np.isnan(p), np.nan, adjusted)


def _holm(p: np.ndarray, n_tests: np.ndarray) -> np.ndarray:
    order, ordered, ranks = _sorted(p)
    scaled = np.where(np.isnan(ordered), -np.inf, ordered * (n_tests - ranks + 1))
    # Step-down: the adjusted value of rank i is the largest scaled value at rank i or below.
    return _unsort(p, order, np.maximum.accumulate(scaled, axis=-1))


def _step_up(p: np.ndarray, n_tests: np.ndarray, factor: np.ndarray | float) -> np.ndarray:
    order, ordered, ranks = _sorted(p)
    scaled = np.where(np.isnan(ordered), np.inf, ordered * n_tests * factor / ranks)
    # The adjusted value of rank i is the smallest scaled value at rank i or above.
    return _unsort(p, order, np.minimum.accumulate(scaled[..., ::-1], axis=-1)[..., ::-1])


def _benjamini_hochberg(p: np.ndarray, n_tests: np.ndarray) -> np.ndarray:
    return _step_up(p, n_tests, 1.0)


def _benjamini_yekutieli(p: np.ndarray, n_tests: np.ndarray) -> np.ndarray:
    # c(m) = 1 + 1/2 + ... + 1/m, with m the number of tests of each row.
    harmonic = np.concatenate([[0.0], np.cumsum(1.0 / np.arange(1, p.shape[-1] + 1))])
    return _step_up(p, n_tests, harmonic[n_tests])


_METHODS: dict[str, Callable[[np.ndarray, np.ndarray], np.ndarray]] = {
    "none": _unadjusted,
    "bonferroni": _bonferroni,
    "holm": _holm,
    "fdr_bh": _benjamini_hochberg,
    "fdr_by": _benjamini_yekutieli,
}
