"""A pipeline spec: a named chain of steps, checked as a whole and applied in order."""

import hashlib
import json
import time

from pydantic import BaseModel, ConfigDict, Field

from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.provenance import StepProvenanceBase
from epoch_assay.engine.steps import StepSpec


class PipelineSpec(BaseModel):
    """A named list of steps, applied in the order written."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    name: str = Field(min_length=1, max_length=200, description="Unique within a run.")
    steps: list[StepSpec] = Field(default_factory=list)

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        """Check every step against the metadata its predecessor produces."""
        for index, step in enumerate(self.steps):
            try:
                meta = step.check(meta)
            except SpecError as error:
                raise error.prefixed("steps", index) from None
        return meta

    def canonical_json(self) -> str:
        """The steps as canonical JSON (sorted keys, defaults filled in); the name is left out."""
        return json.dumps([step.model_dump(mode="json") for step in self.steps], sort_keys=True, separators=(",", ":"))

    def spec_hash(self) -> str:
        """SHA-256 of :meth:`canonical_json`, in hex."""
        return hashlib.sha256(self.canonical_json().encode()).hexdigest()


def apply_pipeline(pipeline: PipelineSpec, epochs: EpochSet) -> tuple[EpochSet, list[StepProvenanceBase]]:
    """Apply each step in order; return the processed epoch set and one record per step."""
    records = []
    for step in pipeline.steps:
        started = time.perf_counter()
        epochs, record = step.apply(epochs)
        record.seconds = round(time.perf_counter() - started, 6)
        records.append(record)
    return epochs, records
