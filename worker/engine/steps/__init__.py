"""Registry of processing steps by their JSON name.

Adding a step: write its module in this package (a :class:`~worker.engine.steps.base.Step`
subclass with ``step: Literal["name"]``), then add the class to ``STEP_CLASSES`` below.
"""

from typing import Annotated, Union

from pydantic import Field

from worker.engine.steps.bad_channels import BadChannels
from worker.engine.steps.baseline import Baseline
from worker.engine.steps.detrend import Detrend
from worker.engine.steps.filters import BandPass, HighPass, LowPass
from worker.engine.steps.ica import Ica
from worker.engine.steps.line_noise import LineNoise
from worker.engine.steps.reference import Reference
from worker.engine.steps.resample import Resample
from worker.engine.steps.trial_rejection import TrialRejection

STEP_CLASSES = (
    HighPass, LowPass, BandPass, LineNoise, Resample, Reference, BadChannels, Ica, Detrend, TrialRejection, Baseline,
)  # fmt: skip

StepSpec = Annotated[Union[STEP_CLASSES], Field(discriminator="step")]  # type: ignore[valid-type]

STEP_NAMES = tuple(cls.model_fields["step"].annotation.__args__[0] for cls in STEP_CLASSES)
