"""What each step of a pipeline did, as the result document records it.

The one place that maps the engine's ``StepRecord`` (``epoch_assay.engine.provenance``) to the
document. ``params`` is the step's own spec model (the discriminated union ``StepSpec``, ``step``
included), so a client generated from the published schema gets one typed class per step rather
than a free-form object; schema_version 1 stored ``params`` without ``step``, which
``epoch_assay.engine.document.run.upgrade_document`` adds back.
"""

from typing import Literal

from pydantic import Field

from epoch_assay.engine.document.values import DocumentModel, Number
from epoch_assay.engine.provenance import StepRecord
from epoch_assay.engine.steps import StepSpec


class RemovedComponent(DocumentModel):
    """An ICA component taken out of the data."""

    index: int = Field(description="Index of the component in the decomposition, from 0.")
    kind: str = Field(description="What the component was recognised as (for example eye or muscle activity).")
    score: Number = Field(description="The score that marked it, in the unit of its criterion; null if undefined.")


class StepProvenance(DocumentModel):
    """One record per applied step; lists and maps stay empty where the step changed nothing."""

    step: str = Field(description="The step's name, as in the pipeline spec.")
    params: StepSpec = Field(description="The step as it was applied, every parameter with its value.")
    channels_flagged: dict[str, list[str]] = Field(
        default_factory=dict, description="Channels found bad, by the criterion that found them."
    )
    channels_dropped: list[str] = Field(default_factory=list, description="Channels removed from the data.")
    channels_interpolated: list[str] = Field(default_factory=list, description="Channels interpolated.")
    trials_removed: dict[str, int] = Field(default_factory=dict, description="Trials removed, per condition label.")
    components_removed: list[RemovedComponent] = Field(default_factory=list, description="ICA components removed.")
    warnings: list[str] = Field(default_factory=list, description="What the step found worth checking.")
    seconds: float = Field(0.0, description="Wall time the step took, in s.")
    stage: Literal["epochs", "continuous"] = Field(
        "epochs", description="epochs: run on epoched data; continuous: run on a recording before epoching."
    )

    @classmethod
    def of(cls, record: StepRecord) -> "StepProvenance":
        """The document's record of ``record``."""
        fields = record.to_json()
        return cls.model_validate({**fields, "params": {"step": record.step, **fields["params"]}})
