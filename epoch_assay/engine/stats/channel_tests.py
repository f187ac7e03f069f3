"""The trial-level test of every channel, with its correction across channels, by name.

``TRIAL_TESTS`` is the one registry of trial-level tests: the scoring spec's allowed values,
the API schema's enum and the spec's description come from it. Adding a test: write a
function ``(a, b, settings) -> ChannelTestOutcome`` and add a :class:`TrialTestKind` to the registry
(and a paragraph to docs/methods.md).
"""

from collections.abc import Callable
from dataclasses import dataclass
from typing import Annotated

import numpy as np

from epoch_assay.engine.stats.corrections import CORRECTIONS, CorrectionMethod, adjust_pvalues
from epoch_assay.engine.stats.permutation import label_permutation_test
from epoch_assay.engine.stats.rank_test import mann_whitney_u
from epoch_assay.engine.stats.registry import OneOf
from epoch_assay.engine.stats.ttest import student_t, welch_t


@dataclass(frozen=True)
class ComparisonSettings:
    """Which test and correction, at which level; permutation count and seed for ``permutation``."""

    test: "TrialTest"
    correction: CorrectionMethod
    alpha: float
    n_permutations: int
    seed: int


@dataclass(frozen=True)
class ChannelTestOutcome:
    """What a trial-level test gives per channel; ``pvalue_max`` only from tests with a max-statistic p."""

    statistic: np.ndarray
    pvalue: np.ndarray
    pvalue_max: np.ndarray | None = None


@dataclass(frozen=True)
class TrialTestKind:
    """A trial-level test: its name, what it is (in words, for the spec's description) and its function."""

    name: str
    description: str
    run: Callable[[np.ndarray, np.ndarray, ComparisonSettings], ChannelTestOutcome]


def _welch(a: np.ndarray, b: np.ndarray, settings: ComparisonSettings) -> ChannelTestOutcome:
    result = welch_t(a, b)
    return ChannelTestOutcome(result.statistic, result.pvalue)


def _student(a: np.ndarray, b: np.ndarray, settings: ComparisonSettings) -> ChannelTestOutcome:
    result = student_t(a, b)
    return ChannelTestOutcome(result.statistic, result.pvalue)


def _mann_whitney(a: np.ndarray, b: np.ndarray, settings: ComparisonSettings) -> ChannelTestOutcome:
    result = mann_whitney_u(a, b)
    return ChannelTestOutcome(result.statistic, result.pvalue)


def _permutation(a: np.ndarray, b: np.ndarray, settings: ComparisonSettings) -> ChannelTestOutcome:
    result = label_permutation_test(a, b, n_permutations=settings.n_permutations, seed=settings.seed)
    return ChannelTestOutcome(result.statistic, result.pvalue, result.pvalue_max)


TRIAL_TESTS: dict[str, TrialTestKind] = {
    kind.name: kind
    for kind in (
        TrialTestKind("welch", "Welch's t (unequal variances)", _welch),
        TrialTestKind("student", "Student's t (pooled variance)", _student),
        TrialTestKind("mann_whitney", "Mann–Whitney U on ranks (the channel's statistic is U)", _mann_whitney),
        TrialTestKind("permutation", "label permutation of Welch's t", _permutation),
    )
}
"""Every trial-level test by name, in the order the API lists them."""

TrialTest = Annotated[str, OneOf(tuple(TRIAL_TESTS), "test")]
"""Name of a test in ``TRIAL_TESTS``."""


@dataclass(frozen=True)
class ChannelTests:
    """Per-channel test results, one family of channels per row of the leading axes.

    statistic : array, shape (..., n_channels), t of first minus second condition (Welch,
        Student, or Welch's t under permutation), or U of the first condition (Mann–Whitney)
    pvalue : array, shape (..., n_channels), two-sided, before correction
    p_adjusted : array, shape (..., n_channels), after the correction across channels
    significant : array of bool, shape (..., n_channels), p_adjusted below alpha
    """

    statistic: np.ndarray
    pvalue: np.ndarray
    p_adjusted: np.ndarray
    significant: np.ndarray


def compare_channels(a: np.ndarray, b: np.ndarray, settings: ComparisonSettings) -> ChannelTests:
    """Test ``a`` against ``b`` on every channel and correct across the channels of each family.

    Parameters
    ----------
    a : array, shape (..., n_trials_a, n_channels), e.g. window means in V
    b : array, shape (..., n_trials_b, n_channels), leading axes equal to those of ``a``

    A correction the test computes itself (``max_stat``) needs a test that gives it (the
    permutation test); the scoring spec refuses other combinations before this is reached.
    """
    outcome = TRIAL_TESTS[settings.test].run(a, b, settings)
    if CORRECTIONS[settings.correction].adjust is not None:
        p_adjusted = adjust_pvalues(outcome.pvalue, settings.correction)
    elif outcome.pvalue_max is not None:
        p_adjusted = outcome.pvalue_max
    else:
        raise ValueError(f"correction {settings.correction!r} needs test 'permutation'")
    return ChannelTests(
        statistic=outcome.statistic,
        pvalue=outcome.pvalue,
        p_adjusted=p_adjusted,
        significant=p_adjusted < settings.alpha,
    )
