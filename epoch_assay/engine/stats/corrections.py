"""Multiple-comparison corrections across channels, one registry of them.

Each correction that adjusts p-values is one function ``(p, n_tests) -> adjusted`` working
along the last axis, so a (n_resamples, n_channels) array is adjusted row by row without a
Python loop. The max-statistic correction is not an adjustment of p-values: it comes out of
the permutation test itself (``epoch_assay.engine.stats.permutation``), so it has no function.

Every correction declares the properties that code taking shortcuts relies on; a shortcut
checks them (see ``epoch_assay.engine.stats.bootstrap``) and
``tests/engine/test_corrections.py`` checks each declaration on random p-values:

``monotone``
    adjusted p-values keep the order of the raw ones: p_i < p_j gives adjusted_i ≤ adjusted_j.
``decided_below_alpha``
    which channels are significant at a level alpha (adjusted p < alpha) is decided by the raw
    p-values below alpha alone: a channel with raw p ≥ alpha is never significant, and
    raising any such p (to 1, say) changes no channel's decision. True for the single-step
    (Bonferroni) and the step-down (Holm) and step-up (Benjamini–Hochberg/–Yekutieli)
    procedures, whose thresholds for the small p-values do not look at the large ones.

Adding a correction: write its function, add a :class:`Correction` to ``CORRECTIONS`` with its
properties, and describe it in docs/methods.md; the scoring spec, the API schema and the tests
take it from the registry.
"""

from collections.abc import Callable
from dataclasses import dataclass
from typing import Annotated

import numpy as np

from epoch_assay.engine.stats.registry import OneOf

Adjustment = Callable[[np.ndarray, np.ndarray], np.ndarray]


@dataclass(frozen=True)
class Correction:
    """A correction across channels: what it controls, how, and the properties shortcuts rely on.

    ``adjust`` is None for a correction that a test computes itself (``max_stat``, from the
    permutation distribution of the largest statistic).
    """

    name: str
    description: str
    adjust: Adjustment | None
    monotone: bool
    decided_below_alpha: bool


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


CORRECTIONS: dict[str, Correction] = {
    correction.name: correction
    for correction in (
        Correction("none", "raw p-values, no correction", _unadjusted, monotone=True, decided_below_alpha=True),
        Correction(
            "bonferroni", "Bonferroni (family-wise error rate)", _bonferroni, monotone=True, decided_below_alpha=True
        ),
        Correction("holm", "Holm's step-down (family-wise error rate)", _holm, monotone=True, decided_below_alpha=True),
        Correction(
            "fdr_bh",
            "Benjamini–Hochberg (false discovery rate)",
            _benjamini_hochberg,
            monotone=True,
            decided_below_alpha=True,
        ),
        Correction(
            "fdr_by",
            "Benjamini–Yekutieli (false discovery rate under any dependence)",
            _benjamini_yekutieli,
            monotone=True,
            decided_below_alpha=True,
        ),
        # The family-wise p of a channel follows its |t|, which need not follow the order of
        # its own permutation p-value; nor is it a function of the raw p-values at all.
        Correction(
            "max_stat",
            "maximum statistic across channels (family-wise error rate; test permutation only)",
            None,
            monotone=False,
            decided_below_alpha=False,
        ),
    )
}
"""Every correction by name, in the order the API lists them."""

P_VALUE_ADJUSTMENTS: dict[str, Correction] = {
    name: correction for name, correction in CORRECTIONS.items() if correction.adjust is not None
}
"""The corrections that adjust a row of p-values by themselves (all but those a test computes)."""

CorrectionMethod = Annotated[str, OneOf(tuple(CORRECTIONS), "correction")]
"""Name of a correction in ``CORRECTIONS``."""
PValueCorrection = Annotated[str, OneOf(tuple(P_VALUE_ADJUSTMENTS), "p-value correction")]
"""Name of a correction in ``P_VALUE_ADJUSTMENTS``."""


def adjust_pvalues(p: np.ndarray, method: PValueCorrection) -> np.ndarray:
    """Adjusted p-values, one family of tests per row.

    Parameters
    ----------
    p : array, shape (..., n_channels), p-values in [0, 1]; NaN for an undefined test
    method : a name in ``P_VALUE_ADJUSTMENTS``: "none", "bonferroni", "holm" (Holm's
        step-down), "fdr_bh" (Benjamini–Hochberg false discovery rate) or "fdr_by"
        (Benjamini–Yekutieli, valid under any dependence between channels)

    Returns
    -------
    array, shape (..., n_channels). NaN p-values stay NaN and are left out of the number
    of tests of their row, as if the channel had not been tested.
    """
    correction = P_VALUE_ADJUSTMENTS.get(method)
    if correction is None or correction.adjust is None:
        raise ValueError(f"unknown correction {method!r} of p-values; choose one of: {', '.join(P_VALUE_ADJUSTMENTS)}")
    p = np.asarray(p, dtype=float)
    n_tests = np.count_nonzero(~np.isnan(p), axis=-1, keepdims=True)
    return correction.adjust(p, n_tests)
