"""Value types shared by the result document's models."""

import math
import numbers
from typing import Annotated

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field


def _finite_or_none(value: object) -> object:
    """NaN and infinities, which JSON cannot carry, become None; numpy scalars become floats.

    Anything but a real number is passed on for pydantic to accept or reject as a float.
    """
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        return value
    number = float(value)
    return number if math.isfinite(number) else None


# A float of the document: null where the value is undefined (NaN) or infinite.
Number = Annotated[float | None, BeforeValidator(_finite_or_none)]

# Lower and upper bound of an interval, each null where undefined.
Bounds = Annotated[list[Number], Field(min_length=2, max_length=2)]


class DocumentModel(BaseModel):
    """Base of every model of the result document: frozen, and no key beyond the declared ones, so
    the published schema says ``additionalProperties: false`` and a generated client has a typed
    attribute for everything. Fields with a default are still required in the published (output)
    schema, because the service always writes them."""

    model_config = ConfigDict(extra="forbid", frozen=True, json_schema_serialization_defaults_required=True)
