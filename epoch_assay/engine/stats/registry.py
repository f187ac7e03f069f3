"""A string field whose allowed values are the names of a registry, so they are written once.

``Annotated[str, OneOf(names, "correction")]`` validates like a ``Literal`` of ``names`` and
is published in the JSON schema (and so in ``/openapi.json``) as a string enum of them.
"""

from dataclasses import dataclass
from typing import Any

from pydantic import GetCoreSchemaHandler, GetJsonSchemaHandler
from pydantic.json_schema import JsonSchemaValue
from pydantic_core import core_schema


@dataclass(frozen=True)
class OneOf:
    """Pydantic metadata: the string must be one of ``names`` (a registry's keys); ``what`` names it in errors."""

    names: tuple[str, ...]
    what: str

    def __get_pydantic_core_schema__(self, source: type[Any], handler: GetCoreSchemaHandler) -> core_schema.CoreSchema:
        return core_schema.no_info_after_validator_function(self._validate, handler(source))

    def __get_pydantic_json_schema__(
        self, schema: core_schema.CoreSchema, handler: GetJsonSchemaHandler
    ) -> JsonSchemaValue:
        json_schema = handler(schema)
        json_schema["enum"] = list(self.names)
        return json_schema

    def _validate(self, value: str) -> str:
        if value not in self.names:
            raise ValueError(f"unknown {self.what} {value!r}; choose one of: {', '.join(self.names)}")
        return value
