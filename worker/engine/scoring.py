"""Score an epoch set: per-channel Welch test of a window mean between two conditions."""

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from worker.engine.epochs import EpochSet
from worker.engine.errors import SpecError
from worker.engine.scoring_spec import ScoringSpec
from worker.engine.stats import BootstrapResult, adjust_pvalues, bootstrap_significant_fraction, welch_t, window_means


def _json_float(value: float) -> float | None:
    """A float for JSON; NaN and infinities, which JSON cannot carry, become None."""
    value = float(value)
    return value if math.isfinite(value) else None


@dataclass(frozen=True)
class ChannelScore:
    """Welch test of one channel; t is first minus second condition, NaN when undefined."""

    name: str
    t: float
    p: float
    p_adjusted: float
    significant: bool

    def to_json(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "t": _json_float(self.t),
            "p": _json_float(self.p),
            "p_adjusted": _json_float(self.p_adjusted),
            "significant": bool(self.significant),
        }


@dataclass(frozen=True)
class BootstrapSummary:
    """Median and 95 % interval (2.5 / 97.5 percentiles) of the significant fraction."""

    median: float
    ci_low: float
    ci_high: float
    resamples: int
    trials_per_condition: int

    @classmethod
    def of(cls, result: BootstrapResult) -> "BootstrapSummary":
        return cls(
            median=result.median,
            ci_low=result.ci_low,
            ci_high=result.ci_high,
            resamples=result.resamples,
            trials_per_condition=result.trials_per_condition,
        )

    def to_json(self) -> dict[str, Any]:
        return {
            "median": _json_float(self.median),
            "ci_low": _json_float(self.ci_low),
            "ci_high": _json_float(self.ci_high),
            "resamples": int(self.resamples),
            "trials_per_condition": int(self.trials_per_condition),
        }


@dataclass(frozen=True)
class PipelineScore:
    """How strongly an epoch set separates the two conditions.

    n_trials : trials of each of the two conditions, in spec order
    channels : one score per scored channel (EEG, not bad), in channel order
    significant_fraction : share of scored channels whose adjusted p is below alpha
    bootstrap : summary over trial resamples, None when the spec asks for none
    """

    n_trials: dict[str, int]
    channels: list[ChannelScore]
    significant_fraction: float
    bootstrap: BootstrapSummary | None

    def to_json(self) -> dict[str, Any]:
        return {
            "n_trials": {label: int(count) for label, count in self.n_trials.items()},
            "channels": [channel.to_json() for channel in self.channels],
            "significant_fraction": _json_float(self.significant_fraction),
            "bootstrap": None if self.bootstrap is None else self.bootstrap.to_json(),
        }


def score_epochs(epochs: EpochSet, spec: ScoringSpec) -> PipelineScore:
    """Score ``epochs`` (data in V) on the contrast, window and test of ``spec``.

    Every trial of the two conditions enters the per-channel test. Raises ``SpecError``
    located under ``("scoring", ...)`` when the epoch set, as a pipeline left it, cannot be
    scored: too few trials in a condition, a window outside the epoch, or no EEG channel.
    """
    try:
        spec.check(epochs.meta())
    except SpecError as error:
        raise error.prefixed("scoring") from None
    picks = epochs.picks()
    if picks.size == 0:
        raise SpecError(
            ("scoring",),
            "no channel is left to score: scoring uses EEG channels not marked bad, and this epoch set has none; "
            "mark fewer channels bad or keep EEG channels in the pipeline",
        )
    means = window_means(epochs.data, epochs.times, spec.window_s)[:, picks]
    first, second = (means[epochs.labels == label] for label in spec.conditions)
    test = welch_t(first, second)
    p_adjusted = adjust_pvalues(test.pvalue, spec.correction)
    significant = p_adjusted < spec.alpha
    channels = [
        ChannelScore(name=epochs.ch_names[index], t=float(t), p=float(p), p_adjusted=float(q), significant=bool(s))
        for index, t, p, q, s in zip(picks, test.statistic, test.pvalue, p_adjusted, significant)
    ]
    return PipelineScore(
        n_trials={label: int(np.count_nonzero(epochs.labels == label)) for label in spec.conditions},
        channels=channels,
        significant_fraction=float(significant.mean()),
        bootstrap=_bootstrap_summary(first, second, spec),
    )


def _bootstrap_summary(first: np.ndarray, second: np.ndarray, spec: ScoringSpec) -> BootstrapSummary | None:
    if spec.bootstrap is None:
        return None
    result = bootstrap_significant_fraction(
        first,
        second,
        trials_per_condition=spec.bootstrap.trials_per_condition,
        resamples=spec.bootstrap.resamples,
        seed=spec.bootstrap.seed,
        alpha=spec.alpha,
        correction=spec.correction,
    )
    return BootstrapSummary.of(result)
