"""What the report shows, read from a result document (``RunResultDocument``): small named records,
no plotting.

Every figure is drawn from these records, so a figure can be checked against numbers that
were put into it. Parts that may be null (the top-level ``ranking`` and ``group``, per entry
``time_course``) are used when the document has them; a document without them still gives a
ranking (from the per-entry scores), the scalp maps and the kept-trials figure.
"""

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from scipy import stats

from epoch_assay.engine.document import FractionInterval, ResultEntry, RunResultDocument, SubsetSpread
from epoch_assay.engine.document.multiverse import PipelineGroupResult, RankingEntry


class RankingRow(NamedTuple):
    """One pipeline on the ranking plot: an estimate of the significant fraction and its interval."""

    name: str
    estimate: float
    ci_low: float
    ci_high: float
    is_reference: bool


@dataclass(frozen=True)
class Ranking:
    """Pipelines best first, and a description of what their point and interval are."""

    rows: list[RankingRow]
    description: str


@dataclass(frozen=True)
class ChannelMap:
    """Per-channel statistic of one pipeline, averaged over the epoch sets that scored it.

    statistic : array, shape (n_channels,), dimensionless (first minus second condition)
    statistic_name : what ``statistic`` is, as the entries name it (``welch_t``, ``mann_whitney_u``, …)
    significant : array of bool, shape (n_channels,): significant in at least half of the epoch sets
    """

    pipeline: str
    ch_names: tuple[str, ...]
    statistic: np.ndarray
    statistic_name: str
    significant: np.ndarray
    n_epoch_sets: int


@dataclass(frozen=True)
class KeptCounts:
    """Mean trials kept per condition and mean EEG channels scored, over the epoch sets of a pipeline."""

    pipeline: str
    trials: dict[str, float]
    channels: float


@dataclass(frozen=True)
class TimeCourse:
    """The significant fraction over time of one pipeline, averaged over its epoch sets.

    times_s : array, shape (n_times,), in s
    fraction : array, shape (n_times,), share of channels in [0, 1]
    """

    pipeline: str
    times_s: np.ndarray
    fraction: np.ndarray


@dataclass(frozen=True)
class SmeSummary:
    """Median over channels of the standardised measurement error, mean over epoch sets, in µV, per condition."""

    pipeline: str
    median_uv: dict[str, float]


def pipeline_names(document: RunResultDocument) -> list[str]:
    """Pipeline names in the order of the run spec."""
    return list(document.provenance.pipeline_hashes)


def reference_pipeline(document: RunResultDocument) -> str:
    """The pipeline others are compared with: ``scoring.reference_pipeline``, else the run's first pipeline."""
    return document.scoring.reference_pipeline or pipeline_names(document)[0]


def scored_entries(document: RunResultDocument, pipeline: str) -> list[ResultEntry]:
    """The entries of ``pipeline`` that were scored (entries with an ``error`` are left out)."""
    return [entry for entry in document.results if entry.pipeline == pipeline and entry.error is None]


def ranking(document: RunResultDocument) -> Ranking:
    """The document's own ``ranking`` when it has one; else pipelines ordered by their estimate, best first:
    from the ``group`` summary when there is one, else from the entries themselves."""
    if document.ranking:
        return _ranking_of_document(document.ranking)
    reference = reference_pipeline(document)
    if document.group:
        return _ranking_of_group(document.group, reference)
    rows, labels = [], set()
    for name in pipeline_names(document):
        found = _row_from_entries(name, scored_entries(document, name), name == reference)
        if found is not None:
            rows.append(found[0])
            labels.add(found[1])
    rows.sort(key=lambda row: -row.estimate)
    description = labels.pop() if len(labels) == 1 else "intervals of mixed kinds (see the result document)"
    return Ranking(rows=rows, description=description)


def _ranking_of_document(entries: list[RankingEntry]) -> Ranking:
    """Rows from the document's ranking entries, in their rank order."""
    rows = []
    for entry in sorted(entries, key=lambda item: item.rank):
        if entry.mean is None:
            continue
        mean = entry.mean
        low = mean if entry.ci_low is None else entry.ci_low
        high = mean if entry.ci_high is None else entry.ci_high
        rows.append(RankingRow(entry.pipeline, mean, low, high, entry.vs_reference is None))
    return Ranking(rows=rows, description="mean over subjects, 95 % t interval")


def _ranking_of_group(groups: list[PipelineGroupResult], reference: str) -> Ranking:
    """Rows from the per-pipeline group summaries: mean over subjects with a t interval from its SE."""
    rows = []
    for group in groups:
        fraction = group.significant_fraction
        if fraction is None or fraction.mean is None:
            continue
        mean, n = fraction.mean, group.n_subjects
        half = 0.0 if fraction.se is None or n < 2 else float(stats.t.ppf(0.975, n - 1) * fraction.se)
        rows.append(RankingRow(group.pipeline, mean, mean - half, mean + half, group.pipeline == reference))
    rows.sort(key=lambda row: -row.estimate)
    return Ranking(rows=rows, description="mean over subjects, 95 % t interval")


def _row_from_entries(name: str, entries: list[ResultEntry], is_reference: bool) -> tuple[RankingRow, str] | None:
    """One epoch set: its resampling summary. Several: the mean and a t interval over epoch sets."""
    fractions = np.array(
        [entry.significant_fraction for entry in entries if entry.significant_fraction is not None],
        dtype=float,
    )
    if fractions.size == 0:
        return None
    if fractions.size == 1:
        boot = entries[0].bootstrap
        if isinstance(boot, FractionInterval) and boot.ci_low is not None and boot.ci_high is not None:
            return RankingRow(
                name, float(fractions[0]), boot.ci_low, boot.ci_high, is_reference
            ), "fraction on all trials, 95 % percentile bootstrap interval"
        if (
            isinstance(boot, SubsetSpread)
            and boot.subset_mean is not None
            and boot.spread_low is not None
            and boot.spread_high is not None
        ):
            return RankingRow(
                name, boot.subset_mean, boot.spread_low, boot.spread_high, is_reference
            ), "mean over subsets of k trials, 2.5–97.5 percentiles over subsets (a spread, not a confidence interval)"
        return RankingRow(
            name, float(fractions[0]), float(fractions[0]), float(fractions[0]), is_reference
        ), "one epoch set, no bootstrap: no interval"
    mean = float(fractions.mean())
    half = float(stats.t.ppf(0.975, fractions.size - 1) * fractions.std(ddof=1) / math.sqrt(fractions.size))
    return RankingRow(name, mean, mean - half, mean + half, is_reference), "mean over epoch sets, 95 % t interval"


def channel_map(document: RunResultDocument, pipeline: str) -> ChannelMap | None:
    """Mean statistic per channel over the epoch sets of ``pipeline``; None when none was scored.

    A channel missing from some epoch sets (dropped by a step, say) is averaged over the others.
    """
    scored = [entry for entry in scored_entries(document, pipeline) if entry.channels]
    if not scored:
        return None
    channel_lists = [entry.channels for entry in scored if entry.channels]
    names: list[str] = []
    for channels in channel_lists:
        names.extend(channel.name for channel in channels if channel.name not in names)
    index = {name: i for i, name in enumerate(names)}
    t_sum, t_count, significant_count = (np.zeros(len(names)) for _ in range(3))
    for channels in channel_lists:
        for channel in channels:
            i = index[channel.name]
            if channel.statistic is not None:
                t_sum[i] += channel.statistic
                t_count[i] += 1
            significant_count[i] += channel.significant
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_t = np.where(t_count > 0, t_sum / np.maximum(t_count, 1), np.nan)
    return ChannelMap(
        pipeline=pipeline,
        ch_names=tuple(names),
        statistic=mean_t,
        statistic_name=scored[0].statistic_name or "statistic",
        significant=significant_count >= len(channel_lists) / 2,
        n_epoch_sets=len(channel_lists),
    )


def kept_counts(document: RunResultDocument) -> list[KeptCounts]:
    """Per pipeline in spec order: mean trials per condition and mean channels scored."""
    conditions = list(document.scoring.conditions)
    kept = []
    for name in pipeline_names(document):
        entries = [entry for entry in scored_entries(document, name) if entry.n_trials]
        if not entries:
            continue
        trials = {
            label: float(np.mean([(entry.n_trials or {}).get(label, 0) for entry in entries])) for label in conditions
        }
        channels = float(np.mean([_channels_kept(entry) for entry in entries]))
        kept.append(KeptCounts(pipeline=name, trials=trials, channels=channels))
    return kept


def _channels_kept(entry: ResultEntry) -> int:
    return entry.channels_kept if entry.channels_kept is not None else len(entry.channels or [])


def time_courses(document: RunResultDocument) -> list[TimeCourse]:
    """Per pipeline with a time course in its entries: the mean curve over epoch sets on a shared time axis."""
    courses = []
    for name in pipeline_names(document):
        curves = [entry.time_course for entry in scored_entries(document, name) if entry.time_course is not None]
        if not curves:
            continue
        times = np.asarray(curves[0].times_s, dtype=float)
        same_axis = [curve for curve in curves if np.array_equal(np.asarray(curve.times_s, dtype=float), times)]
        fraction = np.mean(
            [np.array(curve.significant_fraction, dtype=float) for curve in same_axis], axis=0
        )  # null (undefined) entries become NaN
        courses.append(TimeCourse(pipeline=name, times_s=times, fraction=fraction))
    return courses


def sme_summaries(document: RunResultDocument) -> list[SmeSummary]:
    """Per pipeline whose entries carry ``median_sme_uv`` ({condition: µV}): the mean over epoch sets."""
    summaries = []
    for name in pipeline_names(document):
        medians = [entry.median_sme_uv for entry in scored_entries(document, name) if entry.median_sme_uv]
        if not medians:
            continue
        labels = list(medians[0])
        summaries.append(
            SmeSummary(
                pipeline=name,
                median_uv={
                    label: float(np.mean([m[label] for m in medians if m.get(label) is not None])) for label in labels
                },
            )
        )
    return summaries


def best_pipelines(rows: Sequence[RankingRow], count: int) -> list[str]:
    """The reference first, then the ``count`` best others."""
    reference = [row.name for row in rows if row.is_reference]
    others = [row.name for row in rows if not row.is_reference][:count]
    return reference + others


@dataclass(frozen=True)
class Arrival:
    """An epoch set of a study as it arrived: who, when, and what it held."""

    label: str
    trials: dict[str, int]
    channels: int


@dataclass(frozen=True)
class VerdictFacts:
    """The few result-document fields the plain-language verdict is built from.

    ``pipeline`` is the selection's winner when the run has a selection, else the top of the
    ranking. ``difference`` and ``difference_ci`` are its paired mean difference from the
    reference over subjects; ``p_adjusted`` is adjusted for the number of pipelines compared,
    ``p_unadjusted`` is the paired t test's p alone (used only when no adjusted p exists).
    Held-out fields come from a ``tuning_holdout`` selection.
    """

    pipeline: str | None
    metric: str | None
    n_pipelines: int
    n_subjects: int | None
    reference: str | None
    difference: float | None
    difference_ci: tuple[float | None, float | None] | None
    p_adjusted: float | None
    p_unadjusted: float | None
    selection_rule: str | None
    tuning_subjects: tuple[str, ...]
    holdout_subjects: tuple[str, ...]
    winner_holdout_score: float | None
    reference_holdout_score: float | None


def verdict_facts(document: RunResultDocument) -> VerdictFacts:
    """The fields of ``document`` the verdict reads (the one place that knows where they are)."""
    entries = list(document.ranking or [])
    selection = document.selection if document.selection is not None and document.selection.winner else None
    top = min(entries, key=lambda entry: entry.rank) if entries else None
    pipeline = selection.winner if selection else (top.pipeline if top else None)
    chosen = next((entry for entry in entries if entry.pipeline == pipeline), None)
    versus = chosen.vs_reference if chosen is not None else None
    interval = versus.mean_difference_ci if versus is not None else None
    return VerdictFacts(
        pipeline=pipeline,
        metric=selection.metric if selection else (chosen.metric if chosen else None),
        n_pipelines=len(entries) or len(pipeline_names(document)),
        n_subjects=chosen.n_subjects if chosen else None,
        reference=versus.reference_pipeline if versus else reference_pipeline(document),
        difference=versus.mean_difference if versus else None,
        difference_ci=(interval[0], interval[1]) if interval else None,
        p_adjusted=versus.p_adjusted if versus else None,
        p_unadjusted=versus.paired_t_p if versus else None,
        selection_rule=selection.rule if selection else None,
        tuning_subjects=tuple(selection.tuning_subjects or ()) if selection else (),
        holdout_subjects=tuple(selection.holdout_subjects or ()) if selection else (),
        winner_holdout_score=selection.winner_holdout_score if selection else None,
        reference_holdout_score=selection.reference_holdout_score if selection else None,
    )


METRIC_WORDS = {
    "significant_fraction": "share of channels where the contrast is significant",
    "median_sme": "median standardised measurement error",
    "trials_kept": "trials kept",
}


def verdict_text(facts: VerdictFacts) -> str:
    """One paragraph in plain words: which pipeline, how sure, what was held out. Plain text, not HTML."""
    if facts.pipeline is None:
        return "This run has no ranking of its pipelines, so there is no verdict: see the figures below."
    metric = METRIC_WORDS.get(facts.metric or "", facts.metric or "the run's metric")
    chosen = "chosen by the run's selection rule" if facts.selection_rule else "ranked first"
    parts = [f"{facts.pipeline} is {chosen} of {facts.n_pipelines} pipelines on the {metric}."]
    parts.append(_how_sure(facts))
    parts.append(_held_out(facts))
    return " ".join(part for part in parts if part)


def _how_sure(facts: VerdictFacts) -> str:
    if facts.pipeline == facts.reference:
        return "It is the reference pipeline itself, so there is no comparison with a reference to report."
    if facts.difference is None:
        return (
            f"There is no paired comparison with the reference {facts.reference} (fewer than two subjects scored both)."
        )
    subjects = f" over {facts.n_subjects} subjects" if facts.n_subjects else ""
    low, high = facts.difference_ci or (None, None)
    interval = f" (95 % confidence interval {low:+.2f} to {high:+.2f})" if low is not None and high is not None else ""
    text = f"Against the reference {facts.reference} it differs by {facts.difference:+.2f}{subjects}{interval}"
    if facts.p_adjusted is not None:
        strength = "a difference unlikely to be chance" if facts.p_adjusted < 0.05 else "not enough to rule out chance"
        return f"{text}; {_p(facts.p_adjusted)} adjusted for {_comparisons(facts.n_pipelines - 1)} with the reference: {strength}."
    if facts.p_unadjusted is not None:
        return (
            f"{text}; {_p(facts.p_unadjusted)} from a paired t test not adjusted for the "
            f"{_comparisons(facts.n_pipelines - 1)} made, so it overstates how sure this is."
        )
    return f"{text}."


def _held_out(facts: VerdictFacts) -> str:
    if facts.selection_rule == "tuning_holdout":
        if not facts.holdout_subjects or facts.winner_holdout_score is None:
            return "It was chosen on tuning subjects, but no held-out subject has a score to confirm it."
        versus = (
            f" against {facts.reference_holdout_score:.2f} for the reference"
            if facts.reference_holdout_score is not None
            else ""
        )
        held = (
            "held up"
            if facts.reference_holdout_score is None or facts.winner_holdout_score > facts.reference_holdout_score
            else "did not hold up"
        )
        return (
            f"It was chosen on {len(facts.tuning_subjects)} tuning subjects only; on the "
            f"{len(facts.holdout_subjects)} held-out subjects, who played no part in the choice, it scores "
            f"{facts.winner_holdout_score:.2f}{versus}, so the choice {held}."
        )
    if facts.selection_rule is not None:
        return "It was chosen on a measure blind to the contrast, so no subjects needed to be held out."
    return (
        "No subjects were held out: the ranking describes the same subjects it was chosen on, so the top score is "
        "biased upwards; a run with a tuning/held-out selection confirms a choice."
    )


def _comparisons(count: int) -> str:
    return "1 comparison" if count == 1 else f"{count} comparisons"


def _p(value: float) -> str:
    return "p < 0.001" if value < 0.001 else f"p = {value:.3f}"
