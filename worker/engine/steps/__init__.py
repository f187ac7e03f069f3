"""Registry of processing steps by their JSON name.

Adding a step: write its module in this package (a :class:`~worker.engine.steps.base.Step`
subclass with ``step: Literal["name"]``), then add the class to ``STEP_CLASSES`` below.
"""

from typing import Annotated, Union

from pydantic import Field

from worker.engine.steps.baseline import Baseline
from worker.engine.steps.filters import HighPass, LowPass
from worker.engine.steps.reference import Reference

STEP_CLASSES = (HighPass, LowPass, Reference, Baseline)

StepSpec = Annotated[Union[STEP_CLASSES], Field(discriminator="step")]  # type: ignore[valid-type]

STEP_NAMES = tuple(cls.model_fields["step"].annotation.__args__[0] for cls in STEP_CLASSES)
