"""How a contrast between two conditions is scored: the scoring spec and its checks."""

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from epoch_assay.engine.epochs import EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.stats import (
    CORRECTIONS,
    TRIAL_TESTS,
    BootstrapMode,
    ComparisonSettings,
    CorrectionMethod,
    TrialTest,
)
from epoch_assay.engine.windows import check_window_in_epoch


class BootstrapSpec(BaseModel):
    """Resampling of trials: the significant fraction over subsets or resamples, and the smooth score's interval."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    mode: BootstrapMode = Field(
        "fixed",
        description="fixed: trials_per_condition trials per condition without replacement; equalized: the smaller "
        "condition's count from each, without replacement (both report the subset mean, the estimate of the "
        "fraction at that many trials, and the 2.5/97.5 percentiles as a descriptive spread, not a confidence "
        "interval); all: each condition's own count, with replacement (reports a 95 % percentile interval for the "
        "fraction). Compare artifact-rejection pipelines with equalized or all, since rejection removes trials.",
    )
    trials_per_condition: int = Field(50, ge=2, description="Trials drawn per condition in fixed mode.")
    resamples: int = Field(1000, ge=10, le=100_000, description="Number of resamples.")
    seed: int = Field(7, ge=0, description="Seed of the random generator; same seed, same numbers.")
    ci: Literal["percentile", "bca"] = Field(
        "percentile",
        description="Interval of the fraction in mode all: percentile. bca is refused: the significant fraction is "
        "a step function, and BCa assumes a smooth statistic (Efron, 1987).",
    )

    @model_validator(mode="after")
    def _no_bca_on_a_step_function(self) -> "BootstrapSpec":
        if self.ci == "bca":
            raise ValueError(
                "ci 'bca' is not offered for the significant fraction: the fraction is a step function, jumping "
                "whenever a channel's adjusted p crosses alpha, and the bias-corrected and accelerated interval assumes a smooth "
                "statistic (Efron, 1987); in simulation its coverage fell far below 95 %. Use ci 'percentile' "
                "with mode 'all'; the smooth score mean_welch_t gets its own percentile interval"
            )
        return self


class TimeCourseSpec(BaseModel):
    """The significant fraction over the epoch, for information only."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    bin_s: float | None = Field(
        None, gt=0.0, description="Width of consecutive bins from the epoch start, in s; null for every sample."
    )


class ScoringSpec(BaseModel):
    """The contrast, the time window and the test that score a pipeline."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    conditions: tuple[str, str] = Field(description="The two condition labels; the contrast is first minus second.")
    window_s: tuple[float, float] = Field(description="Time window [a, b] in s, both ends included.")
    alpha: float = Field(0.05, gt=0.0, lt=1.0, description="Significance level applied to adjusted p-values.")
    test: TrialTest = Field(
        "welch",
        description="Trial-level test: "
        + "; ".join(f"{kind.name}: {kind.description}" for kind in TRIAL_TESTS.values())
        + ". The result names the channel statistic in statistic_name.",
    )
    n_permutations: int = Field(
        1000, ge=10, le=100_000, description="Permutations of the permutation test and of the group-level max_stat."
    )
    seed: int = Field(7, ge=0, description="Seed of the permutations; same seed, same p-values.")
    correction: CorrectionMethod = Field(
        "fdr_bh",
        description="Multiple-comparison correction across channels: "
        + "; ".join(f"{correction.name}: {correction.description}" for correction in CORRECTIONS.values()),
    )
    bootstrap: BootstrapSpec | None = None
    mean_t_channels: tuple[str, ...] | None = Field(
        None,
        min_length=1,
        description="Channels averaged in the smooth score mean_welch_t; null for every scored channel. Welch t "
        "values of opposite sign cancel in the mean (with an average reference they nearly must), so name the "
        "channels where the effect is expected with one sign, chosen before seeing the data.",
    )
    reference_pipeline: str | None = Field(
        None, description="Pipeline the group level compares the others with; default the run's first pipeline."
    )
    time_course: TimeCourseSpec | None = Field(
        default_factory=TimeCourseSpec,
        description="Significant fraction per sample or bin (information only); null for none.",
    )

    @model_validator(mode="after")
    def _consistent(self) -> "ScoringSpec":
        if self.conditions[0] == self.conditions[1]:
            raise ValueError("conditions must name two different labels")
        if not self.window_s[0] < self.window_s[1]:
            raise ValueError("window_s must be [start, end] with start < end, in s")
        if self.correction == "max_stat" and self.test != "permutation":
            raise ValueError(
                f"correction 'max_stat' needs test 'permutation' (got test {self.test!r}): the maximum statistic "
                "across channels comes from the permutation distribution; set test to 'permutation' or choose "
                "holm, fdr_bh or fdr_by"
            )
        if self.test == "permutation" and self.bootstrap is not None:
            raise ValueError(
                "bootstrap cannot be combined with test 'permutation': every resample would need its own "
                f"{self.n_permutations} permutations; set bootstrap to null or choose test welch, student or mann_whitney"
            )
        return self

    def comparison(self) -> ComparisonSettings:
        """The test settings the statistics functions take."""
        return ComparisonSettings(
            test=self.test,
            correction=self.correction,
            alpha=self.alpha,
            n_permutations=self.n_permutations,
            seed=self.seed,
        )

    def check(self, meta: EpochSetMeta) -> None:
        """Refuse a scoring that cannot run on an epoch set with this metadata."""
        for index, label in enumerate(self.conditions):
            count = meta.condition_counts.get(label, 0)
            if count < 2:
                found = ", ".join(f"{k} ({v})" for k, v in meta.condition_counts.items()) or "none"
                raise SpecError(
                    ("conditions", index),
                    f"condition {label!r} has {count} trials in this epoch set; at least 2 are needed. "
                    f"Labels found (trials): {found}",
                )
        check_window_in_epoch(self.window_s, meta, ("window_s",))
        if self.mean_t_channels is not None and not set(self.mean_t_channels) & set(meta.ch_names):
            raise SpecError(
                ("mean_t_channels",),
                f"none of the channels {', '.join(self.mean_t_channels)} is in this epoch set; name channels it "
                f"has (for example {', '.join(meta.ch_names[:4])}), or null for every scored channel",
            )
        if self.bootstrap is not None and self.bootstrap.mode == "fixed":
            for label in self.conditions:
                count = meta.condition_counts.get(label, 0)
                if count < self.bootstrap.trials_per_condition:
                    raise SpecError(
                        ("bootstrap", "trials_per_condition"),
                        f"condition {label!r} has {count} trials, fewer than trials_per_condition="
                        f"{self.bootstrap.trials_per_condition}; lower trials_per_condition to at most {count}, "
                        "or use bootstrap mode 'equalized' or 'all'",
                    )
        epoch_s = meta.n_times / meta.sfreq
        if self.time_course is not None and self.time_course.bin_s is not None and self.time_course.bin_s > epoch_s:
            raise SpecError(
                ("time_course", "bin_s"),
                f"bin_s={self.time_course.bin_s} s is longer than the epoch ({epoch_s:.4g} s); choose a shorter bin",
            )
