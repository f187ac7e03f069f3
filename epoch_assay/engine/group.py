"""Group level across the subjects of a run: per-subject summaries, paired comparisons, group ERP test.

Pure functions on the per-subject arrays and on the entries of a result document's
``results`` in their JSON form (``epoch_assay.engine.document.ResultEntry`` dumped). Two epoch
sets of one subject are averaged per subject before anything is compared, so that every
subject weighs the same.
"""

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from epoch_assay.engine.document.multiverse import (
    GroupChannelResult,
    GroupTestResult,
    MeanAndError,
    PairedComparisonResult,
    PipelineGroupResult,
    SubjectSpread,
)
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.stats import adjust_pvalues, one_sample_t, sign_flip_test
from epoch_assay.engine.stats.signed_rank import wilcoxon_p as signed_rank_p
from epoch_assay.engine.units import uv_to_v, v_to_uv

CI_LEVEL = 0.95


@dataclass(frozen=True)
class Spread:
    """Mean, median and standard error of the mean (SD with ddof 1 over √n; NaN for n < 2)."""

    mean: float
    median: float
    se: float

    @classmethod
    def of(cls, values: np.ndarray) -> "Spread":
        """values : array, shape (n_subjects,)"""
        se = float(values.std(ddof=1) / np.sqrt(values.size)) if values.size >= 2 else float("nan")
        return cls(mean=float(values.mean()), median=float(np.median(values)), se=se)


@dataclass(frozen=True)
class PairedComparison:
    """A pipeline's per-subject values against the reference pipeline's, paired by subject.

    mean_difference and its 95 % t interval are of pipeline minus reference; wilcoxon_p is
    the two-sided Wilcoxon signed-rank p (NaN when every difference is zero), paired_t_p
    the two-sided paired t-test p (NaN when the differences have no variance).
    """

    n_subjects: int
    mean_difference: float
    ci_low: float
    ci_high: float
    wilcoxon_p: float
    paired_t_p: float

    def to_document(self, reference: str) -> PairedComparisonResult:
        return PairedComparisonResult(
            reference_pipeline=reference,
            n_subjects=self.n_subjects,
            mean_difference=self.mean_difference,
            mean_difference_ci=[self.ci_low, self.ci_high],
            wilcoxon_p=self.wilcoxon_p,
            paired_t_p=self.paired_t_p,
        )


def paired_comparison(values: np.ndarray, reference: np.ndarray) -> PairedComparison:
    """Compare two arrays of shape (n_subjects,), paired by position; at least 2 subjects."""
    return paired_comparisons(values[None, :], reference)[0]


def paired_comparisons(values: np.ndarray, reference: np.ndarray) -> list[PairedComparison]:
    """Compare each row of ``values``, shape (n_rows, n_subjects), with ``reference``, shape
    (n_subjects,), paired by position; at least 2 subjects, no NaN. All rows in one call of each test."""
    differences = values - reference
    n = differences.shape[-1]
    if n < 2:
        raise ValueError(f"a paired comparison needs at least 2 subjects, got {n}")
    mean = differences.mean(axis=-1)
    half_width = stats.t.ppf(0.5 * (1 + CI_LEVEL), n - 1) * differences.std(axis=-1, ddof=1) / np.sqrt(n)
    # Reference implementations: scipy.stats.wilcoxon (signed_rank.wilcoxon_p gives its p-value, faster with
    # ties) and scipy.stats.ttest_rel (Virtanen et al., 2020, SciPy 1.0).
    nonzero = np.any(differences != 0, axis=-1)
    wilcoxon_p = np.full(mean.shape, np.nan)
    for row in np.flatnonzero(nonzero):
        wilcoxon_p[row] = signed_rank_p(differences[row])
    with np.errstate(divide="ignore", invalid="ignore"):
        paired_t_p = np.atleast_1d(stats.ttest_rel(values, np.broadcast_to(reference, values.shape), axis=-1).pvalue)
    return [
        PairedComparison(
            n_subjects=n,
            mean_difference=float(mean[i]),
            ci_low=float(mean[i] - half_width[i]),
            ci_high=float(mean[i] + half_width[i]),
            wilcoxon_p=float(wilcoxon_p[i]),
            paired_t_p=float(paired_t_p[i]),
        )
        for i in range(mean.size)
    ]


@dataclass(frozen=True)
class GroupTest:
    """One-sample test across subjects of the per-subject condition difference, per channel.

    names : the channels, in order of first appearance
    mean_diff : array, shape (n_channels,), mean over subjects of the difference, in V
    n_subjects : array of int, shape (n_channels,), subjects with a value for the channel
    t, p, p_adjusted : arrays, shape (n_channels,); NaN where undefined
    significant : array of bool, shape (n_channels,)
    """

    names: tuple[str, ...]
    mean_diff: np.ndarray
    n_subjects: np.ndarray
    t: np.ndarray
    p: np.ndarray
    p_adjusted: np.ndarray
    significant: np.ndarray

    @property
    def significant_fraction(self) -> float:
        return float(self.significant.mean()) if self.significant.size else float("nan")

    def to_document(self) -> GroupTestResult:
        return GroupTestResult(
            channels=[
                GroupChannelResult(
                    name=name,
                    t=self.t[i],
                    p=self.p[i],
                    p_adjusted=self.p_adjusted[i],
                    significant=bool(self.significant[i]),
                    mean_diff_uv=float(v_to_uv(self.mean_diff[i])),
                    n_subjects=int(self.n_subjects[i]),
                )
                for i, name in enumerate(self.names)
            ],
            significant_fraction=self.significant_fraction,
        )


def group_channel_test(names: tuple[str, ...], differences: np.ndarray, spec: ScoringSpec) -> GroupTest:
    """Test the per-subject condition differences against zero on every channel.

    differences : array, shape (n_subjects, n_channels), in V; NaN where a subject has no
        value for a channel (a channel its pipeline dropped or flagged)

    With ``max_stat`` the p-values come from sign flips of whole subjects and the
    family-wise p from the largest |t| across channels; otherwise from Student's t
    distribution, adjusted across channels with the run's correction.
    """
    if spec.correction == "max_stat":
        result = sign_flip_test(differences, n_permutations=spec.n_permutations, seed=spec.seed)
        t, p, p_adjusted = result.statistic, result.pvalue, result.pvalue_max
    else:
        test = one_sample_t(differences)
        t, p, p_adjusted = test.statistic, test.pvalue, adjust_pvalues(test.pvalue, spec.correction)
    return GroupTest(
        names=names,
        mean_diff=_mean_of_present(differences),
        n_subjects=(~np.isnan(differences)).sum(axis=0),
        t=t,
        p=p,
        p_adjusted=p_adjusted,
        significant=p_adjusted < spec.alpha,
    )


@dataclass(frozen=True)
class SubjectScores:
    """One pipeline's scores averaged per subject.

    subjects : subject ids, in order of first appearance
    significant_fraction : array, shape (n_subjects,)
    median_sme_uv : per condition label, array, shape (n_subjects,), in µV
    channel_names : union of the scored channels, in order of first appearance
    mean_diff : array, shape (n_subjects, n_channels), condition difference in V, NaN where missing
    """

    subjects: tuple[str, ...]
    significant_fraction: np.ndarray
    median_sme_uv: dict[str, np.ndarray]
    channel_names: tuple[str, ...]
    mean_diff: np.ndarray


def subject_scores(entries: Iterable[dict[str, Any]], conditions: tuple[str, str]) -> SubjectScores:
    """Average the scored entries (no ``error``) of one pipeline per subject."""
    by_subject: dict[str, list[dict[str, Any]]] = {}
    for entry in entries:
        by_subject.setdefault(entry["subject"], []).append(entry)
    names = tuple(dict.fromkeys(ch["name"] for group in by_subject.values() for e in group for ch in e["channels"]))
    column = {name: i for i, name in enumerate(names)}
    fractions: list[float] = []
    smes: dict[str, list[float]] = {label: [] for label in conditions}
    differences: list[np.ndarray] = []
    for group in by_subject.values():
        fractions.append(float(np.mean([_number(e["significant_fraction"]) for e in group])))
        for label in conditions:
            smes[label].append(float(np.mean([_number(e["median_sme_uv"][label]) for e in group])))
        per_set = np.full((len(group), len(names)), np.nan)
        for row, e in enumerate(group):
            for channel in e["channels"]:
                per_set[row, column[channel["name"]]] = _number(channel["mean_diff_uv"])
        # A channel one epoch set of the subject lacks is averaged over the others.
        differences.append(_mean_of_present(per_set))
    return SubjectScores(
        subjects=tuple(by_subject),
        significant_fraction=np.array(fractions),
        median_sme_uv={label: np.array(values) for label, values in smes.items()},
        channel_names=names,
        mean_diff=np.asarray(uv_to_v(np.array(differences).reshape(len(by_subject), len(names)))),
    )


def _mean_of_present(values: np.ndarray) -> np.ndarray:
    """Mean over axis 0 of the values that are not NaN; NaN for a column with none."""
    present = ~np.isnan(values)
    count = present.sum(axis=0)
    total = np.where(present, values, 0.0).sum(axis=0)
    return np.where(count > 0, total / np.maximum(count, 1), np.nan)


def _number(value: float | None) -> float:
    return float("nan") if value is None else float(value)


def group_summary(entries: list[dict[str, Any]], pipelines: list[str], spec: ScoringSpec) -> list[PipelineGroupResult]:
    """The result document's ``group``: one entry per pipeline, in run order.

    entries : the result's ``results``; entries with an ``error`` are left out and counted
    pipelines : the run's pipeline names; the reference is ``spec.reference_pipeline`` or
        the first of them
    """
    reference = spec.reference_pipeline or pipelines[0]
    scores = {}
    errors = {}
    for name in pipelines:
        own = [entry for entry in entries if entry["pipeline"] == name]
        errors[name] = sum(entry.get("error") is not None for entry in own)
        scores[name] = subject_scores([entry for entry in own if entry.get("error") is None], spec.conditions)
    return [_pipeline_group(name, scores[name], errors[name], scores[reference], reference, spec) for name in pipelines]


def _pipeline_group(
    name: str, scores: SubjectScores, n_errors: int, reference: SubjectScores, reference_name: str, spec: ScoringSpec
) -> PipelineGroupResult:
    n = len(scores.subjects)
    if n == 0:
        return PipelineGroupResult(
            pipeline=name,
            n_subjects=n,
            n_entries_with_error=n_errors,
            significant_fraction=None,
            median_sme_uv=None,
            vs_reference=None,
            group_test=None,
        )
    spread = Spread.of(scores.significant_fraction)
    median_sme_uv = {}
    for label, values in scores.median_sme_uv.items():
        sme = Spread.of(values)
        median_sme_uv[label] = MeanAndError(mean=sme.mean, se=sme.se)
    return PipelineGroupResult(
        pipeline=name,
        n_subjects=n,
        n_entries_with_error=n_errors,
        significant_fraction=SubjectSpread(mean=spread.mean, median=spread.median, se=spread.se),
        median_sme_uv=median_sme_uv,
        vs_reference=_versus_reference(name, scores, reference, reference_name),
        group_test=group_channel_test(scores.channel_names, scores.mean_diff, spec).to_document() if n >= 2 else None,
    )


def _versus_reference(
    name: str, scores: SubjectScores, reference: SubjectScores, reference_name: str
) -> PairedComparisonResult | None:
    if name == reference_name:
        return None
    position = {subject: i for i, subject in enumerate(reference.subjects)}
    shared = [i for i, subject in enumerate(scores.subjects) if subject in position]
    if len(shared) < 2:
        return None
    values = scores.significant_fraction[shared]
    paired = reference.significant_fraction[[position[scores.subjects[i]] for i in shared]]
    return paired_comparison(values, paired).to_document(reference_name)
