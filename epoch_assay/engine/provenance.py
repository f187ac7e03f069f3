"""What a step did, recorded next to every result, and the package versions that did it.

Every step's record has the fields of :class:`StepProvenanceBase`: the step's name, the
implementation version of the step, its parameters, its warnings, its wall time and the
stage it ran in. A step that reports more (channels it found bad, trials it removed,
components it took out) declares those fields in its own :class:`StepOutputs` model. The
record model of each step is built from its parameters and outputs by
:class:`~epoch_assay.engine.steps.base.Step`, and
:data:`epoch_assay.engine.steps.StepProvenance` is the union of all of them, told apart by
``step``.
"""

from collections.abc import Callable
from enum import StrEnum
from functools import lru_cache
from importlib.metadata import PackageNotFoundError, version
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

#: The distributions whose code computes every step's numbers: a new version of any of them
#: may change a step's output, so each is part of every step-cache key. Steps that use more
#: (scikit-learn, python-picard) add theirs in ``Step.dependencies``.
NUMERICAL_PACKAGES = ("epoch-assay", "numpy", "scipy", "mne")

NOT_INSTALLED = "not installed"


class Stage(StrEnum):
    """Where a step runs when the service epochs a recording."""

    CONTINUOUS = "continuous"
    """On the continuous recording, before epoching."""
    EPOCHS = "epochs"
    """On the epochs (and on every uploaded epoch set)."""


class StepOutputs(BaseModel):
    """What a step reports beyond its parameters and warnings; nothing unless a step declares fields."""

    model_config = ConfigDict(extra="forbid")


class StepProvenanceBase(BaseModel):
    """The fields every step's record has; ``step`` and ``params`` are narrowed per step."""

    model_config = ConfigDict(extra="forbid")

    step: str = Field(description="Name of the step.")
    version: int = Field(ge=1, description="Implementation version of the step that made the record.")
    params: BaseModel = Field(description="The step's parameters, defaults filled in.")
    warnings: list[str] = Field(default_factory=list, description="What the step warns about, in words.")
    seconds: float = Field(
        0.0,
        ge=0.0,
        description="Wall time the step took, in s (for an output taken from the step cache: when computed).",
    )
    stage: Stage = Field(Stage.EPOCHS, description="Whether the step ran on the recording or on the epochs.")
    run: int | None = Field(
        None,
        ge=1,
        description="The run (1-based) of a session a continuous-stage record belongs to; null for one run.",
    )

    def to_json(self) -> dict[str, Any]:
        """The record as JSON-compatible Python values."""
        return self.model_dump(mode="json")


#: Per step name, how a stored record's ``params`` and outputs written under names a step has since
#: changed are put in today's names; a step that renames its parameters registers one here.
LEGACY_RECORD_RENAMES: dict[str, Callable[[dict[str, Any]], dict[str, Any]]] = {}


def upgrade_legacy_record(record: dict[str, Any]) -> dict[str, Any]:
    """A record stored before records were typed per step, in today's shape.

    Those records had every step's output fields (empty where the step has none) and no
    ``version``; each step was then at its first version. Names a step has changed since are
    put in today's names (``LEGACY_RECORD_RENAMES``).
    """
    legacy_output_fields = (
        "channels_flagged",
        "channels_dropped",
        "channels_interpolated",
        "trials_removed",
        "components_removed",
    )
    upgraded = {name: value for name, value in record.items() if name not in legacy_output_fields or value}
    upgraded.setdefault("version", 1)
    rename = LEGACY_RECORD_RENAMES.get(upgraded.get("step", ""))
    return rename(upgraded) if rename is not None else upgraded


@lru_cache(maxsize=64)
def installed_version(distribution: str) -> str:
    """Version of an installed distribution (e.g. ``"scipy"``), or ``NOT_INSTALLED``."""
    try:
        return version(distribution)
    except PackageNotFoundError:
        return NOT_INSTALLED
