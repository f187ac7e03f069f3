"""Registry of processing steps by their JSON name.

Adding a step: write its module in this package (a :class:`~epoch_assay.engine.steps.base.Step`
subclass with ``step: Literal["name"]``), then add the class to ``STEP_CLASSES`` below.
"""

from typing import Annotated, Union

from pydantic import Field

from epoch_assay.engine.steps.bad_channels import BadChannels
from epoch_assay.engine.steps.baseline import Baseline
from epoch_assay.engine.steps.detrend import Detrend
from epoch_assay.engine.steps.filters import BandPass, HighPass, LowPass
from epoch_assay.engine.steps.ica import Ica
from epoch_assay.engine.steps.line_noise import LineNoise
from epoch_assay.engine.steps.reference import Reference
from epoch_assay.engine.steps.resample import Resample
from epoch_assay.engine.steps.trial_rejection import TrialRejection

STEP_CLASSES = (
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

# A union built from the tuple (the `X | Y` spelling cannot take a tuple).
StepSpec = Annotated[Union[STEP_CLASSES], Field(discriminator="step")]  # type: ignore[valid-type]  # noqa: UP007

STEP_NAMES = tuple(cls.model_fields["step"].annotation.__args__[0] for cls in STEP_CLASSES)
