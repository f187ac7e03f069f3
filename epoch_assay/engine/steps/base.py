"""The contract every processing step follows.

A step is a pydantic model: its fields are the step's JSON parameters, validated once
when the spec is parsed. ``check`` refuses parameters that cannot work on a given epoch
set (known from its metadata alone) and returns the metadata of the output, so a whole
pipeline can be checked before any data is loaded. ``apply`` does the work.
"""

from typing import ClassVar

from pydantic import BaseModel, ConfigDict

from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.provenance import StepRecord


class Step(BaseModel):
    """Base class of all steps. Subclasses set ``step: Literal["name"]``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    #: Where the step belongs when a recording is epoched by the service:
    #: "continuous" steps run before epoching, "epochs" steps after.
    stage: ClassVar[str] = "epochs"

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        """Raise :class:`~epoch_assay.engine.errors.SpecError` if the step cannot run on ``meta``.

        Returns the metadata of the step's output. The default accepts anything and
        changes nothing.
        """
        return meta

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepRecord]:
        """Run the step; return the new epoch set and what was done."""
        raise NotImplementedError

    def record(self, **fields: object) -> StepRecord:
        """A provenance record of this step with its parameters filled in."""
        return StepRecord(step=self.step, params=self.model_dump(exclude={"step"}), **fields)  # type: ignore[attr-defined]
