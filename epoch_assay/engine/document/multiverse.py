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


class RankingEntry(DocumentModel):
    """One pipeline of the ranking: the mean over subjects of the metric, with its 95 % t interval."""

    rank: int = Field(description="Position, 1 for the best.")
    pipeline: str = Field(description="Name of the pipeline.")
    n_subjects: int = Field(description="Subjects with a value of the metric.")
    mean: Number = Field(description="Mean over subjects of the metric, in the metric's unit.")
    ci_low: Number = Field(description="Lower bound of the 95 % t interval; null with fewer than 2 subjects.")
    ci_high: Number = Field(description="Upper bound of the 95 % t interval; null with fewer than 2 subjects.")
    vs_reference: PairedComparisonResult | None = Field(
        description="Metric against the reference pipeline; null for the reference itself or with fewer than 2 "
        "shared subjects."
    )
    metric: str = Field(
        description="The metric: significant_fraction (share 0–1), median_sme (µV) or trials_kept (count)."
    )
    group: PipelineGroupResult | None = Field(description="The pipeline's group-level summary.")


class LevelEffectResult(DocumentModel):
    """Difference of a level from its factor's baseline level, in the analysed scale, with its 95 % interval."""

    estimate: Number = Field(description="Estimate (radians of arcsin √x for a share, else the metric's unit).")
    ci_low: Number = Field(description="Lower bound of the 95 % normal-approximation interval.")
    ci_high: Number = Field(description="Upper bound of the 95 % normal-approximation interval.")


class FactorEffectResult(DocumentModel):
    """Wald test of one factor and the effect of each of its levels."""

    p: Number = Field(description="Wald chi-square p that every level equals the baseline; null for one level.")
    baseline_level: str = Field(description="The factor's first level, against which the others are estimated.")
    levels: dict[str, LevelEffectResult] = Field(description="Effect of each level, by level name.")


class FactorEffectsResult(DocumentModel):
    """The mixed model of the metric on a grid's factors; content fields are null when ``error`` is set."""

    metric: str = Field(description="The metric modelled.")
    scale: str | None = Field(None, description="arcsine_sqrt for a share 0–1, identity otherwise.")
    n_observations: int | None = Field(None, description="(subject, pipeline) values in the model.")
    n_subjects: int | None = Field(None, description="Subjects in the model.")
    factors: dict[str, FactorEffectResult] | None = Field(None, description="Each factor's test, by factor name.")
    warnings: list[str] | None = Field(None, description="Warnings of the model fit.")
    error: str | None = Field(None, description="Why the model could not be fitted on this run; null when it was.")


class SelectionOutcome(DocumentModel):
    """The winner by the run's selection rule; content fields are null when ``error`` is set."""

    rule: str = Field(description="tuning_holdout or contrast_blind.")
    metric: str = Field(description="The metric the winner was chosen on.")
    winner: str | None = Field(None, description="The chosen pipeline.")
    tuning_subjects: list[str] | None = Field(None, description="Subjects that chose the winner.")
    holdout_subjects: list[str] | None = Field(None, description="Subjects that played no part in the choice.")
    winner_tuning_score: Number = Field(None, description="Winner's mean metric on the tuning subjects.")
    winner_holdout_score: Number = Field(None, description="Winner's mean metric on the held-out subjects.")
    reference_holdout_score: Number = Field(None, description="Reference's mean metric on the held-out subjects.")
    error: str | None = Field(None, description="Why no winner could be chosen on this run; null when one was.")


class CacheCounts(DocumentModel):
    """Step-cache lookups of the run."""

    hits: int = Field(description="Step outputs read from the cache.")
    misses: int = Field(description="Step outputs computed.")
