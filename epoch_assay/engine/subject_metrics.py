"""Per-subject metric tables: one number per (pipeline, subject), the input of ranking,
factor effects and selection.

A subject with several epoch sets (sessions) gets the mean over them; an entry that could
not be scored contributes nothing, and a subject with no scored entry for a pipeline is NaN.
"""

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

Entry = dict[str, Any]


def _significant_fraction(entry: Entry) -> float | None:
    return entry.get("significant_fraction")


def _trials_kept(entry: Entry) -> float | None:
    counts = entry.get("n_trials")
    return None if counts is None else float(sum(counts.values()))


def _median_sme(entry: Entry) -> float | None:
    """Mean over the two conditions of the median SME over scored channels, in µV; noise only."""
    per_condition = [value for value in (entry.get("median_sme_uv") or {}).values() if value is not None]
    return float(np.mean(per_condition)) if per_condition else None


def _collapsed_columns(entry: Entry) -> tuple[np.ndarray, np.ndarray] | None:
    """Per scored channel, the collapsed window mean and its SME, in µV; None without them."""
    pairs = [
        (channel["collapsed_mean_uv"], channel["collapsed_sme_uv"])
        for channel in entry.get("channels") or ()
        if channel.get("collapsed_mean_uv") is not None and channel.get("collapsed_sme_uv") is not None
    ]
    if not pairs:
        return None
    means, smes = np.array(pairs, dtype=float).T
    return means, smes


def _collapsed_snr(entry: Entry) -> float | None:
    """Root mean square over scored channels of the collapsed ERP's window mean over its SME.

    Each channel's ratio is a t of the collapsed ERP against zero. Squaring ignores its
    polarity (an ERP is positive at some sites and negative at others); the mean over
    channels lets every scored channel count once, so a focal ERP still raises it and no
    single channel decides; under no signal its square has expectation near 1 whatever the
    noise level, so lowering noise and signal together cannot raise it, while lowering
    noise alone can.
    """
    columns = _collapsed_columns(entry)
    if columns is None:
        return None
    means, smes = columns
    usable = smes > 0
    return float(np.sqrt(np.mean((means[usable] / smes[usable]) ** 2))) if usable.any() else None


def _collapsed_erp(entry: Entry) -> float | None:
    """Root mean square over scored channels of the collapsed ERP's window mean, in µV."""
    columns = _collapsed_columns(entry)
    return None if columns is None else float(np.sqrt(np.mean(columns[0] ** 2)))


# metric → (how to read it from a result entry, whether a higher value is better)
METRICS: dict[str, tuple[Callable[[Entry], float | None], bool]] = {
    "significant_fraction": (_significant_fraction, True),
    "trials_kept": (_trials_kept, True),
    "median_sme": (_median_sme, False),
    "collapsed_snr": (_collapsed_snr, True),
    "collapsed_erp_uv": (_collapsed_erp, True),
}
BOUNDED_METRICS = frozenset({"significant_fraction"})


@dataclass(frozen=True)
class MetricTable:
    """values : array, shape (n_pipelines, n_subjects), in the metric's unit, NaN where missing."""

    metric: str
    pipelines: tuple[str, ...]
    subjects: tuple[str, ...]
    values: np.ndarray

    @property
    def higher_is_better(self) -> bool:
        return METRICS[self.metric][1]

    def row(self, pipeline: str) -> np.ndarray:
        """The pipeline's value per subject, shape (n_subjects,)."""
        return self.values[self.pipelines.index(pipeline)]

    def for_subjects(self, subjects: Sequence[str]) -> "MetricTable":
        """The same table restricted to ``subjects``, in that order."""
        columns = [self.subjects.index(subject) for subject in subjects]
        return MetricTable(self.metric, self.pipelines, tuple(subjects), self.values[:, columns])

    def mean_scores(self) -> np.ndarray:
        """Mean over subjects per pipeline, shape (n_pipelines,), NaN for a pipeline with no value."""
        counts = np.sum(np.isfinite(self.values), axis=1)
        sums = np.nansum(self.values, axis=1)
        return np.divide(sums, counts, out=np.full(sums.shape, np.nan), where=counts > 0)


def metric_table(results: Sequence[Entry], metric: str, pipelines: Sequence[str]) -> MetricTable:
    """Build the table of ``metric`` from the result's entries (``pipeline``, ``subject`` and scores)."""
    if metric not in METRICS:
        raise ValueError(f"unknown metric {metric!r}; known: {', '.join(METRICS)}")
    read = METRICS[metric][0]
    subjects = tuple(dict.fromkeys(entry["subject"] for entry in results))
    sums = np.zeros((len(pipelines), len(subjects)))
    counts = np.zeros((len(pipelines), len(subjects)))
    row_of = {name: index for index, name in enumerate(pipelines)}
    column_of = {subject: index for index, subject in enumerate(subjects)}
    for entry in results:
        value = None if entry.get("error") is not None else read(entry)
        if value is None or entry["pipeline"] not in row_of:
            continue
        position = row_of[entry["pipeline"]], column_of[entry["subject"]]
        sums[position] += value
        counts[position] += 1
    values = np.divide(sums, counts, out=np.full(sums.shape, np.nan), where=counts > 0)
    return MetricTable(metric=metric, pipelines=tuple(pipelines), subjects=subjects, values=values)
