"""How a contrast between two conditions is scored: the scoring spec and its checks."""

from pydantic import BaseModel, ConfigDict, Field, model_validator

from epoch_assay.engine.epochs import EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.stats import (
    CORRECTIONS,
    TRIAL_TESTS,
    BootstrapMode,
    ComparisonSettings,
    CorrectionMethod,
    IntervalMethod,
    TrialTest,
)
from epoch_assay.engine.windows import check_window_in_epoch


class BootstrapSpec(BaseModel):
    """Resampling of trials to put a confidence interval on the significant fraction."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    mode: BootstrapMode = Field(
        "fixed",
        description="fixed: trials_per_condition trials per condition without replacement; equalized: the smaller "
        "condition's count from each, without replacement; all: each condition's own count, with replacement. "
        "Compare artifact-rejection pipelines with equalized or all, since rejection removes trials.",
    )
    trials_per_condition: int = Field(50, ge=2, description="Trials drawn per condition in fixed mode.")
    resamples: int = Field(1000, ge=10, le=100_000, description="Number of bootstrap resamples.")
    seed: int = Field(7, ge=0, description="Seed of the random generator; same seed, same numbers.")
    ci: IntervalMethod = Field(
        "percentile", description="percentile, or bca (bias-corrected and accelerated; mode all)."
    )

    @model_validator(mode="after")
    def _bca_needs_all(self) -> "BootstrapSpec":
        if self.ci == "bca" and self.mode != "all":
            raise ValueError(
                "ci 'bca' needs mode 'all': BCa corrects towards the fraction on all trials, which subsets of fewer "
                "trials do not estimate; use mode 'all' or ci 'percentile'"
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
        + "; ".join(f"{kind.name}: {kind.description}" for kind in TRIAL_TESTS.values()),
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
