"""Wire schemas of a study's locked pipeline."""

from datetime import datetime

from pydantic import BaseModel, ConfigDict, Field, model_validator
from pydantic.config import JsonDict

from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.scoring_spec import ScoringSpec

LOCK_EXAMPLE: JsonDict = {
    "pipeline": {
        "name": "hp0.5-avg",
        "steps": [{"step": "highpass", "cutoff_hz": 0.5}, {"step": "reference", "kind": "average"}],
    },
    "scoring": {"conditions": ["incongruent", "congruent"], "window_s": [0.3, 0.5]},
}


class LockCreate(BaseModel):
    """A pipeline and its scoring, or a succeeded run whose selection winner (and scoring) to lock."""

    model_config = ConfigDict(
        extra="forbid", json_schema_extra={"examples": [LOCK_EXAMPLE, {"run": "run_0123456789abcdef"}]}
    )

    pipeline: PipelineSpec | None = None
    scoring: ScoringSpec | None = None
    run: str | None = Field(None, description="A succeeded run of the study with a selection; its winner is locked.")

    @model_validator(mode="after")
    def _pipeline_or_run(self) -> "LockCreate":
        if (self.pipeline is None) == (self.run is None):
            raise ValueError("give exactly one of pipeline (with scoring) or run (a run whose winner to lock)")
        if self.pipeline is not None and self.scoring is None:
            raise ValueError("a locked pipeline needs the scoring its new epoch sets are scored with")
        return self


class LockedOut(BaseModel):
    study: str
    pipeline: dict
    pipeline_hash: str = Field(description="SHA-256 of the pipeline's canonical steps.")
    scoring: dict
    source_run: str | None = Field(description="The run whose winner was locked, if any.")
    locked_at: datetime
