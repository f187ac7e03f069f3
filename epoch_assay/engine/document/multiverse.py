"""The multiverse parts of the result document: group level, ranking, factor effects, selection, cache.

The models say what is written; the numbers come from ``epoch_assay.engine.group``, ``ranking``,
``factor_effects`` and ``selection``. A part that cannot be computed on a run carries its reason in
``error`` and null content fields.
"""

from pydantic import Field

from epoch_assay.engine.document.values import Bounds, DocumentModel, Number


class PairedComparisonResult(DocumentModel):
    """A pipeline's per-subject values against the reference pipeline's, paired by subject."""

    reference_pipeline: str = Field(description="The pipeline compared against.")
    n_subjects: int = Field(description="Subjects with a value for both pipelines.")
    mean_difference: Number = Field(
        description="Mean over subjects of pipeline minus reference, in the unit of the compared value."
    )
    mean_difference_ci: Bounds = Field(description="95 % Student t interval of mean_difference, [low, high].")
    wilcoxon_p: Number = Field(description="Two-sided Wilcoxon signed-rank p; null when every difference is zero.")
    paired_t_p: Number = Field(description="Two-sided paired t-test p; null when the differences do not vary.")


class GroupChannelResult(DocumentModel):
    """One-sample test across subjects of one channel's per-subject condition difference."""

    name: str = Field(description="Channel name.")
    t: Number = Field(description="One-sample t across subjects; null if undefined.")
    p: Number = Field(description="Two-sided p-value.")
    p_adjusted: Number = Field(description="p-value adjusted across channels by the run's correction.")
    significant: bool = Field(description="Whether p_adjusted is below the run's alpha.")
    mean_diff_uv: Number = Field(description="Mean over subjects of the condition difference, in µV.")
    n_subjects: int = Field(description="Subjects with a value for this channel.")


class GroupTestResult(DocumentModel):
    """The group test on every channel."""

    channels: list[GroupChannelResult] = Field(description="One test per channel, in order of first appearance.")
    significant_fraction: Number = Field(description="Share 0–1 of channels significant at group level.")


class SubjectSpread(DocumentModel):
    """Mean, median and standard error of the mean over subjects (SE null with fewer than 2 subjects)."""

    mean: Number = Field(description="Mean over subjects, in the unit of the value.")
    median: Number = Field(description="Median over subjects, in the unit of the value.")
    se: Number = Field(description="Standard error of the mean (SD with ddof 1 over √n), in the unit of the value.")


class MeanAndError(DocumentModel):
    """Mean over subjects and its standard error (null with fewer than 2 subjects)."""

    mean: Number = Field(description="Mean over subjects, in µV.")
    se: Number = Field(description="Standard error of the mean, in µV.")


class PipelineGroupResult(DocumentModel):
    """One pipeline at group level; content fields are null when no subject was scored."""

    pipeline: str = Field(description="Name of the pipeline.")
    n_subjects: int = Field(description="Subjects with at least one scored entry.")
    n_entries_with_error: int = Field(description="Entries of this pipeline that could not be scored.")
    significant_fraction: SubjectSpread | None = Field(description="Per-subject significant fraction, a share 0–1.")
    median_sme_uv: dict[str, MeanAndError] | None = Field(
        description="Per-subject median SME, by condition label, in µV."
    )
    vs_reference: PairedComparisonResult | None = Field(
        description="Significant fraction against the reference pipeline; null for the reference itself or "
        "with fewer than 2 shared subjects."
    )
    group_test: GroupTestResult | None = Field(description="Group test per channel; null with fewer than 2 subjects.")


class AdjustedComparisonResult(PairedComparisonResult):
    """The paired comparison with the reference, and its p adjusted across every pipeline compared."""

    p_adjusted: Number = Field(
        None,
        description="Two-sided p of the paired t against the distribution of the largest |t| over all pipelines "
        "compared with the reference, under sign flips of whole subjects (max-t; Westfall & Young, 1993): "
        "controls the family-wise error. Null if undefined or in documents written before it existed.",
    )
    adjustment: str | None = Field(
        None, description="The adjustment in words: method, pipelines, subjects, exact or Monte Carlo and seed."
    )


class RankSpreadResult(DocumentModel):
    """Where the pipeline's rank falls over bootstraps of the subjects; descriptive, not a confidence interval."""

    low: float = Field(description="2.5th percentile of the rank over subject bootstraps (1 = best).")
    high: float = Field(description="97.5th percentile of the rank over subject bootstraps (1 = best).")
    n_bootstraps: int = Field(description="Bootstraps of the subjects drawn.")
    kind: str = Field(description="What the spread is, in words.")


class RankingEntry(DocumentModel):
    """One pipeline of the ranking: the mean over subjects of the metric, with its 95 % t interval."""

    rank: int = Field(description="Position, 1 for the best.")
    pipeline: str = Field(description="Name of the pipeline.")
    n_subjects: int = Field(description="Subjects with a value of the metric.")
    mean: Number = Field(description="Mean over subjects of the metric, in the metric's unit.")
    ci_low: Number = Field(description="Lower bound of the 95 % t interval; null with fewer than 2 subjects.")
    ci_high: Number = Field(description="Upper bound of the 95 % t interval; null with fewer than 2 subjects.")
    vs_reference: AdjustedComparisonResult | None = Field(
        description="Metric against the reference pipeline, unadjusted and adjusted p; null for the reference "
        "itself or with fewer than 2 shared subjects."
    )
    probability_best: Number = Field(
        None,
        description="Share 0–1 of subject bootstraps in which this pipeline has the best mean (ties share); "
        "descriptive of rank uncertainty, not a posterior probability.",
    )
    rank_spread: RankSpreadResult | None = Field(
        None, description="Percentiles of the rank over subject bootstraps; null for a pipeline with no score."
    )
    metric: str = Field(
        description="The metric: significant_fraction (share 0–1), collapsed_snr (unitless), median_sme (µV) or "
        "trials_kept (count)."
    )
    group: PipelineGroupResult | None = Field(description="The pipeline's group-level summary.")


class LevelEffectResult(DocumentModel):
    """Mean over subjects of the level's per-subject contrast with the factor's baseline level, in the metric's
    unit (documents written before per-subject contrasts: the mixed model's estimate)."""

    estimate: Number = Field(description="Mean over subjects of the level minus the baseline level.")
    ci_low: Number = Field(description="Lower bound of the 95 % Student t interval over subjects.")
    ci_high: Number = Field(description="Upper bound of the 95 % Student t interval over subjects.")
    t: Number = Field(None, description="One-sample t of the contrasts against zero; null for the baseline.")
    p: Number = Field(None, description="Two-sided p of that t; null for the baseline.")
    n_subjects: int | None = Field(None, description="Subjects with a contrast for this level.")


class FactorEffectResult(DocumentModel):
    """The test across subjects of one factor and the effect of each of its levels."""

    p: Number = Field(
        description="p that every level equals the baseline: one-sample t (2 levels) or Hotelling's T² (more); "
        "null for one level or too few subjects."
    )
    test: str | None = Field(None, description='"one-sample t", "Hotelling T²" or "none".')
    statistic: Number = Field(None, description="t, or Hotelling's F.")
    df: list[float] | None = Field(None, description="Degrees of freedom of the statistic.")
    n_subjects: int | None = Field(None, description="Subjects in the factor's test.")
    baseline_level: str = Field(description="The factor's first level, against which the others are estimated.")
    levels: dict[str, LevelEffectResult] = Field(description="Effect of each level, by level name.")


class FactorEffectsResult(DocumentModel):
    """Per-subject factor contrasts tested across subjects; content fields are null when ``error`` is set."""

    metric: str = Field(description="The metric analysed.")
    scale: str | None = Field(None, description="identity (documents written before: arcsine_sqrt for a share).")
    method: str | None = Field(None, description="The method in words; null in documents of the mixed model.")
    n_observations: int | None = Field(None, description="(subject, pipeline) values analysed.")
    n_subjects: int | None = Field(None, description="Subjects with at least one value.")
    factors: dict[str, FactorEffectResult] | None = Field(None, description="Each factor's test, by factor name.")
    warnings: list[str] | None = Field(None, description="Why a test could not be made.")
    error: str | None = Field(None, description="Why nothing could be computed on this run; null otherwise.")


class MeanIntervalResult(DocumentModel):
    """Mean over subjects with its Student t 95 % interval."""

    n_subjects: int = Field(description="Subjects with a value.")
    mean: Number = Field(description="Mean over subjects, in the metric's unit.")
    ci_low: Number = Field(description="Lower bound of the 95 % t interval; null with fewer than 2 subjects.")
    ci_high: Number = Field(description="Upper bound of the 95 % t interval; null with fewer than 2 subjects.")


class TuningScores(DocumentModel):
    """Means over the tuning subjects; the winner's is biased upwards by its choice."""

    winner_score: Number = Field(description="Winner's mean metric on the tuning subjects.")
    reference_score: Number = Field(description="Reference's mean metric on the tuning subjects.")


class HoldoutResult(DocumentModel):
    """The winner and the reference on the held-out subjects, who played no part in the choice."""

    winner: MeanIntervalResult = Field(description="Winner's mean with its 95 % t interval.")
    reference: MeanIntervalResult = Field(description="Reference's mean with its 95 % t interval.")
    winner_vs_reference: PairedComparisonResult | None = Field(
        description="Winner minus reference, paired by held-out subject; null with fewer than 2 subjects."
    )


class SelectionOutcome(DocumentModel):
    """The winner by the run's selection rule; content fields are null when ``error`` is set."""

    rule: str = Field(description="tuning_holdout or contrast_blind.")
    metric: str = Field(description="The metric the winner was chosen on.")
    winner: str | None = Field(None, description="The chosen pipeline.")
    reference_pipeline: str | None = Field(None, description="The pipeline the winner is compared with.")
    tuning_subjects: list[str] | None = Field(None, description="Subjects that chose the winner.")
    holdout_subjects: list[str] | None = Field(None, description="Subjects that played no part in the choice.")
    winner_tuning_score: Number = Field(None, description="Winner's mean metric on the tuning subjects.")
    winner_holdout_score: Number = Field(None, description="Winner's mean metric on the held-out subjects.")
    reference_holdout_score: Number = Field(None, description="Reference's mean metric on the held-out subjects.")
    tuning: TuningScores | None = Field(None, description="Winner's and reference's scores on the tuning subjects.")
    holdout: HoldoutResult | None = Field(
        None, description="tuning_holdout: intervals and the paired test on the held-out subjects; null otherwise."
    )
    optimism: Number = Field(
        None,
        description="Tuning advantage minus held-out advantage of the winner over the reference (signed so that "
        "positive is better), in the metric's unit; null without held-out subjects.",
    )
    warnings: list[str] | None = Field(None, description="E.g. a noise-only metric that chose a signal-removing step.")
    error: str | None = Field(None, description="Why no winner could be chosen on this run; null when one was.")


class ExploratoryNote(DocumentModel):
    """Parts of the document that are exploratory because the run chose a winner."""

    parts: list[str] = Field(description="Top-level keys of the document that are exploratory.")
    reason: str = Field(description="Why, and where the confirmatory result is.")


class CacheCounts(DocumentModel):
    """Step-cache lookups of the run."""

    hits: int = Field(description="Step outputs read from the cache.")
    misses: int = Field(description="Step outputs computed.")
