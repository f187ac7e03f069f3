"""How a contrast between two conditions is scored: the scoring spec and its checks."""

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from worker.engine.epochs import EpochSetMeta
from worker.engine.errors import SpecError
from worker.engine.windows import check_window_in_epoch


class BootstrapSpec(BaseModel):
    """Resampling of trials to put a confidence interval on the significant fraction."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    trials_per_condition: int = Field(50, ge=2, description="Trials drawn per condition, without replacement.")
    resamples: int = Field(1000, ge=10, le=100_000, description="Number of bootstrap resamples.")
    seed: int = Field(7, ge=0, description="Seed of the random generator; same seed, same numbers.")


class ScoringSpec(BaseModel):
    """The contrast, the time window and the test that score a pipeline."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    conditions: tuple[str, str] = Field(description="The two condition labels; the contrast is first minus second.")
    window_s: tuple[float, float] = Field(description="Time window [a, b] in s, both ends included.")
    alpha: float = Field(0.05, gt=0.0, lt=1.0, description="Significance level applied to adjusted p-values.")
    test: Literal["welch"] = Field("welch", description="Trial-level test between the conditions.")
    correction: Literal["none", "bonferroni", "fdr_bh"] = Field(
        "fdr_bh", description="Multiple-comparison correction across channels."
    )
    bootstrap: BootstrapSpec | None = None

    @model_validator(mode="after")
    def _distinct_conditions_and_ordered_window(self) -> "ScoringSpec":
        if self.conditions[0] == self.conditions[1]:
            raise ValueError("conditions must name two different labels")
        if not self.window_s[0] < self.window_s[1]:
            raise ValueError("window_s must be [start, end] with start < end, in s")
        return self

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
        if self.bootstrap is not None:
            for label in self.conditions:
                count = meta.condition_counts.get(label, 0)
                if count < self.bootstrap.trials_per_condition:
                    raise SpecError(
                        ("bootstrap", "trials_per_condition"),
                        f"condition {label!r} has {count} trials, fewer than trials_per_condition="
                        f"{self.bootstrap.trials_per_condition}; lower trials_per_condition to at most {count}",
                    )
