"""One entry of the result document: a pipeline applied to an epoch set, and its score."""

from typing import Annotated, Literal

from pydantic import Field

from epoch_assay.engine.document.values import Bounds, DocumentModel, Number
from epoch_assay.engine.steps import StepProvenance

# What a channel's statistic is: Welch's or Student's t, Welch's t with a permutation p-value, or
# Mann–Whitney's U of the first condition.
StatisticName = Literal["welch_t", "student_t", "mann_whitney_u", "welch_t_permutation"]

#: The statistic each trial-level test reports per channel.
STATISTIC_NAMES: dict[str, StatisticName] = {
    "welch": "welch_t",
    "student": "student_t",
    "mann_whitney": "mann_whitney_u",
    "permutation": "welch_t_permutation",
}


class ChannelScore(DocumentModel):
    """The test of one channel between the two conditions (first minus second) on the window mean."""

    name: str = Field(description="Channel name.")
    statistic: Number = Field(
        description="The channel's test statistic, first minus second condition, dimensionless: Welch's or "
        "Student's t, or the first condition's Mann–Whitney U, as the entry's statistic_name says; null if undefined."
    )
    p: Number = Field(description="Two-sided p-value of the channel's test.")
    p_adjusted: Number = Field(description="p-value adjusted across the scored channels by the run's correction.")
    significant: bool = Field(description="Whether p_adjusted is below the run's alpha.")
    mean_diff_uv: Number = Field(description="Difference of the condition means of the window mean, in µV.")
    hedges_g: Number = Field(description="Hedges' g of the window mean (Hedges & Olkin, 1985), unitless.")
    hedges_g_ci: Bounds = Field(description="95 % interval of Hedges' g, [low, high].")
    sme_uv: dict[str, Number] = Field(
        description="Standardized measurement error of each condition's window mean, by condition label, in µV."
    )
    collapsed_mean_uv: Number = Field(
        None,
        description="Collapsed ERP: mean of the two condition means of the window mean, equal weights, blind to the "
        "contrast (Luck & Gaspelin, 2017), in µV; null in documents written before it existed.",
    )
    collapsed_sme_uv: Number = Field(
        None, description="Standard error of collapsed_mean_uv, ½·√(SME₁² + SME₂²), in µV; null if not written."
    )


class SubsetSpread(DocumentModel):
    """The significant fraction over subsets of k trials per condition drawn without replacement (modes
    fixed and equalized): an estimate at k trials and a descriptive spread, no confidence interval."""

    mode: Literal["fixed", "equalized"] = Field(description="How trials were drawn (the spec's bootstrap.mode).")
    resamples: int = Field(description="Number of subsets drawn.")
    trials_per_condition: int = Field(description="k: trials drawn from each condition in every subset.")
    share_of_trials_used: dict[str, Number] = Field(
        description="k over the trials the pipeline kept, by condition label, a share 0–1; at 1 every subset is "
        "the whole data and the spread is zero."
    )
    subset_mean: Number = Field(
        description="Mean over subsets of the significant fraction, a share 0–1: the estimate of the expected "
        "fraction at k trials per condition. Null in documents upgraded from schema version 1, which stored a "
        "median instead."
    )
    spread_low: Number = Field(
        description="2.5th percentile over subsets of the significant fraction, a share 0–1: a descriptive "
        "spread at k trials, not a confidence bound (it narrows as k nears the trials kept)."
    )
    spread_high: Number = Field(
        description="97.5th percentile over subsets of the significant fraction, a share 0–1; descriptive, as "
        "spread_low."
    )


class FractionInterval(DocumentModel):
    """The significant fraction over resamples of each condition's own trial count drawn with replacement
    (mode all), and its 95 % percentile interval."""

    mode: Literal["all"] = Field(description="How trials were drawn (the spec's bootstrap.mode).")
    resamples: int = Field(description="Number of resamples drawn.")
    trials_drawn: dict[str, int] = Field(description="Trials drawn in each resample, by condition label.")
    ci: Literal["percentile"] = Field(description="How the interval was computed: 2.5 / 97.5 percentiles.")
    ci_low: Number = Field(
        description="Lower bound of the 95 % percentile interval for the expected significant fraction at the "
        "trials kept, a share 0–1. Null in documents upgraded from schema version 1 whose interval was BCa, "
        "which does not suit the fraction."
    )
    ci_high: Number = Field(description="Upper bound of that interval, a share 0–1; null where ci_low is.")


BootstrapSummary = Annotated[SubsetSpread | FractionInterval, Field(discriminator="mode")]


class MeanWelchT(DocumentModel):
    """The smooth score: mean over channels of Welch's t of the window mean (first minus second condition)."""

    value: Number = Field(
        description="Mean over the channels averaged of Welch's t on all trials, dimensionless; null when none "
        "has a defined t."
    )
    n_channels: int = Field(
        description="Channels averaged: the scored channels, or those of scoring.mean_t_channels that are scored."
    )
    ci_low: Number = Field(
        description="Lower bound of the 95 % percentile interval over trials resampled with replacement within "
        "each condition, for the expectation of value at the trials kept; null without resampling."
    )
    ci_high: Number = Field(description="Upper bound of that interval; null without resampling.")
    resamples: int = Field(description="Resamples behind the interval; 0 without resampling.")


class TimeCourse(DocumentModel):
    """Significant fraction of the scored channels at each sample or bin; for information, not a test."""

    bin_s: float | None = Field(description="Bin width asked for, in s; null for every sample.")
    times_s: list[float] = Field(description="Centre of each sample or bin, in s.")
    significant_fraction: list[Number] = Field(
        description="Share 0–1 of scored channels significant at each entry of times_s."
    )


class PipelineScore(DocumentModel):
    """How strongly an epoch set separates the two conditions, and how noisy its scores are.

    In a result entry every field is null when the entry has an ``error``.
    """

    n_trials: dict[str, int] | None = Field(
        default=None, description="Trials of each condition entering the test, by label."
    )
    statistic_name: StatisticName | None = Field(default=None, description="What each channel's statistic is.")
    channels: list[ChannelScore] | None = Field(
        default=None, description="One score per scored channel (EEG, not bad), in channel order."
    )
    significant_fraction: Number = Field(
        default=None, description="Share 0–1 of scored channels whose adjusted p is below alpha."
    )
    significant_fraction_uploaded: Number = Field(
        default=None,
        description="Significant scored channels over the uploaded EEG channels, a share 0–1: a channel the "
        "pipeline dropped or flagged bad counts as not significant.",
    )
    channels_kept: int | None = Field(default=None, description="Number of scored channels.")
    channels_uploaded: int | None = Field(default=None, description="Number of EEG channels as uploaded.")
    median_sme_uv: dict[str, Number] | None = Field(
        default=None, description="Median over scored channels of the SME, by condition label, in µV."
    )
    time_course: TimeCourse | None = Field(
        default=None, description="Null when the scoring spec asks for no time course."
    )
    bootstrap: BootstrapSummary | None = Field(
        default=None,
        description="The significant fraction over trial resamples: subset mean and spread (modes fixed, "
        "equalized) or percentile interval (mode all); null when the scoring spec asks for no bootstrap.",
    )
    mean_welch_t: MeanWelchT | None = Field(
        default=None, description="The smooth score, with its interval when the scoring spec asks for resampling."
    )


class EntrySource(DocumentModel):
    """Which pipeline was applied to which epoch set."""

    pipeline: str = Field(description="Name of the pipeline.")
    pipeline_hash: str = Field(description="SHA-256 of the pipeline's canonical JSON spec, hex.")
    epoch_set: str = Field(description="Id of the epoch set.")
    subject: str = Field(description="Subject of the epoch set.")
    session: str | None = Field(description="Session of the epoch set; null when not given.")


# Pydantic lists the fields of the last base first, so an entry reads: source, score, provenance.
class ResultEntry(PipelineScore, EntrySource):
    """One pipeline applied to one epoch set: its score, what each step did, and any error."""

    provenance: list[StepProvenance] = Field(description="One record per applied step, in order.")
    warnings: list[str] = Field(description="The steps' warnings, in order.")
    error: str | None = Field(
        default=None, description="Why this epoch set could not be scored with this pipeline; null when it was scored."
    )
