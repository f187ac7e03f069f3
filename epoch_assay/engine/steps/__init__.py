"""Registry of processing steps by their JSON name, and the union of their provenance records.

Adding a step: write its module in this package (a :class:`~epoch_assay.engine.steps.base.Step`
subclass with ``step: Literal["name"]``, its ``version``, ``examples`` and, when it reports
more than warnings, its ``Outputs``), then add the class to ``STEP_CLASSES`` below. The spec
union, the record union and the contract test (``tests/engine/test_step_contract.py``) follow
from the tuple.
"""

from typing import TYPE_CHECKING, Annotated, Union

from pydantic import Field

from epoch_assay.engine.steps.bad_channels import BadChannels
from epoch_assay.engine.steps.base import Step
from epoch_assay.engine.steps.baseline import Baseline
from epoch_assay.engine.steps.detrend import Detrend
from epoch_assay.engine.steps.filters import BandPass, HighPass, LowPass
from epoch_assay.engine.steps.ica import Ica
from epoch_assay.engine.steps.line_noise import LineNoise
from epoch_assay.engine.steps.reference import Reference
from epoch_assay.engine.steps.resample import Resample
from epoch_assay.engine.steps.trial_rejection import TrialRejection

STEP_CLASSES: tuple[type[Step], ...] = (
    HighPass,
    LowPass,
    BandPass,
    LineNoise,
    Resample,
    Reference,
    BadChannels,
    Ica,
    Detrend,
    TrialRejection,
    Baseline,
)

# Unions built from the tuple (the `X | Y` spelling cannot take a tuple). A type checker cannot follow a
# union built at run time, so it sees what every member is: a Step.
if TYPE_CHECKING:
    StepSpec = Step
else:
    StepSpec = Annotated[Union[STEP_CLASSES], Field(discriminator="step")]  # noqa: UP007
"""One step of a pipeline spec, told apart by ``step``."""

_PROVENANCE_MODELS = tuple(cls.provenance_model for cls in STEP_CLASSES)
StepProvenance = Annotated[Union[_PROVENANCE_MODELS], Field(discriminator="step")]  # type: ignore[valid-type]  # noqa: UP007
"""What one step did (its record in a result's ``provenance``), told apart by ``step``."""
