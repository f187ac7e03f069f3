"""One entry of the result document: a pipeline applied to an epoch set, and its score."""

from pydantic import Field

from epoch_assay.engine.document.provenance import StepProvenance
from epoch_assay.engine.document.values import Bounds, DocumentModel, Number
from epoch_assay.engine.stats import BootstrapMode, IntervalMethod


class ChannelScore(DocumentModel):
    """The test of one channel between the two conditions (first minus second) on the window mean."""

    name: str = Field(description="Channel name.")
    t: Number = Field(
        description="Welch's or Student's t (also under permutation), or Mann–Whitney's U; null if undefined."
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


class BootstrapSummary(DocumentModel):
    """Median and 95 % interval of the significant fraction over trial resamples, and how they were drawn."""

    median: Number = Field(description="Median over resamples of the significant fraction, a share 0–1.")
    ci_low: Number = Field(description="Lower bound of the 95 % interval of the significant fraction, a share 0–1.")
    ci_high: Number = Field(description="Upper bound of the 95 % interval of the significant fraction, a share 0–1.")
    resamples: int = Field(description="Number of resamples drawn.")
    trials_per_condition: int | None = Field(
        description="Trials drawn from each condition in modes fixed and equalized; null in mode all."
    )
    mode: BootstrapMode = Field(description="How trials were drawn (see the scoring spec's bootstrap.mode).")
    ci: IntervalMethod = Field(description="How the interval was computed (see the scoring spec's bootstrap.ci).")
    trials_drawn: dict[str, int] = Field(description="Trials drawn in each resample, by condition label.")
    with_replacement: bool = Field(description="Whether trials were drawn with replacement.")


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

    n_trials: dict[str, int] | None = Field(None, description="Trials of each condition entering the test, by label.")
    channels: list[ChannelScore] | None = Field(
        None, description="One score per scored channel (EEG, not bad), in channel order."
    )
    significant_fraction: Number = Field(
        None, description="Share 0–1 of scored channels whose adjusted p is below alpha."
    )
    significant_fraction_uploaded: Number = Field(
        None,
        description="Significant scored channels over the uploaded EEG channels, a share 0–1: a channel the "
        "pipeline dropped or flagged bad counts as not significant.",
    )
    channels_kept: int | None = Field(None, description="Number of scored channels.")
    channels_uploaded: int | None = Field(None, description="Number of EEG channels as uploaded.")
    median_sme_uv: dict[str, Number] | None = Field(
        None, description="Median over scored channels of the SME, by condition label, in µV."
    )
    time_course: TimeCourse | None = Field(None, description="Null when the scoring spec asks for no time course.")
    bootstrap: BootstrapSummary | None = Field(None, description="Null when the scoring spec asks for no bootstrap.")


class EntrySource(DocumentModel):
    """Which pipeline was applied to which epoch set."""

    pipeline: str = Field(description="Name of the pipeline.")
    pipeline_hash: str = Field(description="SHA-256 of the pipeline's canonical JSON spec, hex.")
    epoch_set: str = Field(description="Id of the epoch set.")
    subject: str = Field(description="Subject of the epoch set.")
    session: str | None = Field(description="Session of the epoch set; null when not given.")


class ResultEntry(PipelineScore, EntrySource):
    """One pipeline applied to one epoch set: its score, what each step did, and any error.

    Fields come in the order source, score, provenance (pydantic lists base-class fields from the last base).
    """

    provenance: list[StepProvenance] = Field(description="One record per applied step, in order.")
    warnings: list[str] = Field(description="The steps' warnings, in order.")
    error: str | None = Field(
        None, description="Why this epoch set could not be scored with this pipeline; null when it was scored."
    )
