"""The contract every processing step follows.

A step is a pydantic model: its fields are the step's JSON parameters, validated once
when the spec is parsed. ``check`` refuses parameters that cannot work on a given epoch
set (known from its metadata alone) and returns the metadata of the output, so a whole
pipeline can be checked before any data is loaded. ``apply`` does the work and returns
the new epoch set with the step's provenance record; it leaves its input unchanged.

What ``check`` predicts, ``apply`` keeps: the output's sampling rate, times, channel names,
types and bads, and trial counts are those ``check`` returned, except the fields a step's
``data_dependent()`` names (which channels are bad or dropped, how many trials are
removed), where ``check`` gives the most ``apply`` can return. ``tests/engine/test_step_contract.py``
checks this for every registered step.

Each step class also declares:

``version``
    the implementation version, part of every step-cache key and of the step's record.
    Bump it with any change that can change the step's output numbers or metadata
    (see DEVELOPERS.md).
``Outputs``
    a pydantic model of what the step reports beyond its parameters and warnings; its
    record model (``provenance_model``) is built from it and from the parameters.
``examples``
    parameter sets, covering the step's options, that the contract test runs.
"""

from typing import Any, ClassVar, Literal, get_args, get_origin

from pydantic import BaseModel, ConfigDict, Field, create_model

from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.provenance import NUMERICAL_PACKAGES, Stage, StepOutputs, StepProvenanceBase

#: Fields of :class:`~epoch_assay.engine.epochs.EpochSetMeta` that a step may name in
#: ``data_dependent``: ``ch_names`` (channels may be dropped, so the output's are a subset of
#: the predicted ones, in order, with their types), ``bads`` (which channels are marked bad
#: depends on the data; they stay among the output's channels) and ``condition_counts``
#: (trials may be removed: at most the predicted count per condition).
DataDependentField = Literal["ch_names", "bads", "condition_counts"]


class Step(BaseModel):
    """Base class of all steps. Subclasses set ``step: Literal["name"]``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    #: Where the step belongs when a recording is epoched by the service.
    stage: ClassVar[Stage] = Stage.EPOCHS
    #: Implementation version; bump it when the step's output numbers or metadata can change.
    version: ClassVar[int] = 1
    #: What the step reports beyond parameters and warnings.
    Outputs: ClassVar[type[StepOutputs]] = StepOutputs
    #: Parameter sets (JSON, without ``step``) covering the step's options, run by the contract test.
    examples: ClassVar[tuple[dict[str, Any], ...]] = ()
    #: The record model of this step and the model of its parameters in it, built when the class is defined.
    provenance_model: ClassVar[type[StepProvenanceBase]]
    params_model: ClassVar[type[BaseModel]]

    @classmethod
    def __pydantic_init_subclass__(cls, **kwargs: Any) -> None:
        super().__pydantic_init_subclass__(**kwargs)
        name = step_name(cls)
        if name is not None:
            cls.params_model = _params_model(cls, name)
            cls.provenance_model = _provenance_model(cls, name)

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        """Raise :class:`~epoch_assay.engine.errors.SpecError` if the step cannot run on ``meta``.

        Returns the metadata of the step's output. The default accepts anything and
        changes nothing.
        """
        return meta

    def data_dependent(self) -> frozenset[DataDependentField]:
        """Parts of the output metadata that ``check`` can only bound (see the module docstring); none by default."""
        return frozenset()

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepProvenanceBase]:
        """Run the step; return the new epoch set and what was done."""
        raise NotImplementedError

    def dependencies(self) -> tuple[str, ...]:
        """Distributions whose code computes this step's output (their versions are in its cache key)."""
        return NUMERICAL_PACKAGES

    def record(self, warnings: list[str] | None = None, **outputs: Any) -> StepProvenanceBase:
        """A provenance record of this step with its parameters, version and ``outputs`` filled in."""
        return self.provenance_model.model_validate(
            {
                "step": step_name(type(self)),
                "version": self.version,
                "params": self.model_dump(exclude={"step"}),
                "warnings": warnings or [],
                **outputs,
            }
        )


def step_name(cls: type[Step]) -> str | None:
    """The JSON name of a step class (its ``step`` literal); None for an abstract base."""
    field = cls.model_fields.get("step")
    if field is None or get_origin(field.annotation) is not Literal:
        return None
    (name,) = get_args(field.annotation)
    return str(name)


def _params_model(cls: type[Step], name: str) -> type[BaseModel]:
    """``<Step>Params``: the step's fields but ``step``, as they appear in its record."""
    fields: Any = {
        field_name: (field.annotation, field) for field_name, field in cls.model_fields.items() if field_name != "step"
    }
    model = create_model(
        f"{cls.__name__}Params",
        __config__=ConfigDict(extra="forbid", frozen=True),
        __doc__=f"Parameters of the {name} step.",
        **fields,
    )
    return _importable_as(model, cls, "params_model")


def _provenance_model(cls: type[Step], name: str) -> type[StepProvenanceBase]:
    """``<Step>Provenance``: the common record fields, the step's parameters and its outputs."""
    fields: Any = {
        "step": (Literal[name], Field(description="Name of the step.")),
        "params": (cls.params_model, Field(description="The step's parameters, defaults filled in.")),
        **{field_name: (field.annotation, field) for field_name, field in cls.Outputs.model_fields.items()},
    }
    model = create_model(
        f"{cls.__name__}Provenance", __base__=StepProvenanceBase, __doc__=f"What the {name} step did.", **fields
    )
    return _importable_as(model, cls, "provenance_model")


def _importable_as(model: type[BaseModel], cls: type[Step], attribute: str) -> Any:
    # Pickle finds a class by module and qualified name; records cross process boundaries.
    model.__module__ = cls.__module__
    model.__qualname__ = f"{cls.__qualname__}.{attribute}"
    return model
