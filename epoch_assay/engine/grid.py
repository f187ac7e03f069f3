"""Grid runs: the cartesian product of factors, each level a list of steps, as named pipelines.

A grid ``{"factors": {factor: {level: [steps...]}}}`` gives one pipeline per combination of
levels, factors taken in the order written. Each pipeline is the concatenation of its levels'
steps and is named ``factor=level,factor=level,…``, so the name alone says where it sits in
the grid; that is why factor and level names may not contain ``=`` or ``,``.
"""

import math
from dataclasses import dataclass
from itertools import product

from pydantic import BaseModel, ConfigDict, Field, field_validator

from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.steps import StepSpec

DEFAULT_MAX_PIPELINES = 512
_RESERVED_CHARACTERS = ("=", ",")

FactorLevels = dict[str, list[StepSpec]]


class GridSpec(BaseModel):
    """Factors in the order written, each mapping level names to the steps of that level."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    factors: dict[str, FactorLevels] = Field(
        min_length=1,
        description="factor → {level → [steps]}; a level may have no steps. Names may not contain '=' or ','.",
    )

    @field_validator("factors")
    @classmethod
    def _names_usable_in_pipeline_names(cls, factors: dict[str, FactorLevels]) -> dict[str, FactorLevels]:
        for factor, levels in factors.items():
            if not levels:
                raise ValueError(f"factor {factor!r} has no levels; give it at least one level")
            for name in (factor, *levels):
                if not name or any(character in name for character in _RESERVED_CHARACTERS):
                    raise ValueError(
                        f"{name!r}: factor and level names must be non-empty and contain neither '=' nor ',', "
                        "because pipelines are named factor=level,factor=level"
                    )
        return factors

    def size(self) -> int:
        """Number of pipelines the grid expands to."""
        return math.prod(len(levels) for levels in self.factors.values())


@dataclass(frozen=True)
class GridPipeline:
    """One point of a grid: its pipeline and the level it takes of each factor (in factor order)."""

    pipeline: PipelineSpec
    levels: dict[str, str]


def grid_pipeline_name(levels: dict[str, str]) -> str:
    """``factor=level,factor=level,…`` in the order of ``levels``."""
    return ",".join(f"{factor}={level}" for factor, level in levels.items())


def expand_grid(grid: GridSpec, max_pipelines: int = DEFAULT_MAX_PIPELINES) -> list[GridPipeline]:
    """Every combination of levels, the last factor varying fastest.

    Raises ``SpecError`` at ``("grid", "factors")`` when the grid has more than
    ``max_pipelines`` pipelines, before any pipeline is built.
    """
    size = grid.size()
    if size > max_pipelines:
        counts = " × ".join(f"{len(levels)} ({factor})" for factor, levels in grid.factors.items())
        raise SpecError(
            ("grid", "factors"),
            f"the grid expands to {counts} = {size} pipelines, more than the limit of {max_pipelines}; "
            "drop levels, or split the grid over several runs",
        )
    factors = list(grid.factors)
    points = []
    for combination in product(*(grid.factors[factor].items() for factor in factors)):
        levels = {factor: level for factor, (level, _) in zip(factors, combination, strict=False)}
        steps = [step for _, level_steps in combination for step in level_steps]
        pipeline = PipelineSpec.model_validate({"name": grid_pipeline_name(levels), "steps": steps})
        points.append(GridPipeline(pipeline=pipeline, levels=levels))
    return points
