"""Wire schemas of runs: the run spec clients post and the documents they read back."""

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator
from pydantic.config import JsonDict

from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.grid import GridSpec, expand_grid
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.selection import SelectionSpec

RunStatus = Literal["queued", "running", "succeeded", "failed"]

RUN_EXAMPLE: JsonDict = {
    "study": "READ-01",
    "epoch_sets": ["es_3f9c0a1b7d2e4f60"],
    "pipelines": [
        {"name": "raw", "steps": []},
        {
            "name": "hp0.1-avg",
            "steps": [{"step": "highpass", "cutoff_hz": 0.1}, {"step": "reference", "kind": "average"}],
        },
    ],
    "scoring": {
        "conditions": ["incongruent", "congruent"],
        "window_s": [0.3, 0.5],
        "alpha": 0.05,
        "correction": "fdr_bh",
        "bootstrap": {"trials_per_condition": 40, "resamples": 1000, "seed": 7},
    },
}


class RunCreate(BaseModel):
    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [RUN_EXAMPLE]})

    study: str = Field(description="Code of the study the epoch sets belong to.")
    epoch_sets: list[str] = Field(min_length=1, max_length=2000, description="Ids of the epoch sets to score.")
    pipelines: list[PipelineSpec] | None = Field(
        None, min_length=1, max_length=512, description="The pipelines to score; or give a grid instead."
    )
    grid: GridSpec | None = Field(
        None, description="Factors whose levels combine into the pipelines (see docs/steps.md, Grids)."
    )
    scoring: ScoringSpec
    selection: SelectionSpec | None = Field(None, description="How to choose a winner without circularity.")

    @model_validator(mode="after")
    def _unique_names_and_ids(self) -> "RunCreate":
        if (self.pipelines is None) == (self.grid is None):
            raise ValueError("give exactly one of pipelines (a list) or grid (factors and their levels)")
        if len(set(self.epoch_sets)) != len(self.epoch_sets):
            raise ValueError("epoch_sets lists the same id more than once")
        if self.pipelines is None:
            return self  # a grid's names are unique by construction; its reference is checked on expansion
        names = [pipeline.name for pipeline in self.pipelines]
        repeated = sorted({name for name in names if names.count(name) > 1})
        if repeated:
            raise ValueError(f"pipeline names must be unique within a run; repeated: {', '.join(repeated)}")
        reference = self.scoring.reference_pipeline
        if reference is not None and reference not in names:
            raise ValueError(
                f"scoring.reference_pipeline {reference!r} is not a pipeline of this run; "
                f"name one of: {', '.join(names)}"
            )
        return self

    def resolved_pipelines(self, max_pipelines: int) -> list[PipelineSpec]:
        """The run's pipelines, listed or expanded from the grid.

        Raises ``SpecError`` when there are more than ``max_pipelines`` or the grid has no
        pipeline named like ``scoring.reference_pipeline``.
        """
        if self.grid is None:
            pipelines = list(self.pipelines or [])
            if len(pipelines) > max_pipelines:
                raise SpecError(
                    ("pipelines",),
                    f"the run lists {len(pipelines)} pipelines, more than the limit "
                    f"of {max_pipelines}; split it over several runs",
                )
            return pipelines
        pipelines = [point.pipeline for point in expand_grid(self.grid, max_pipelines)]
        reference = self.scoring.reference_pipeline
        if reference is not None and reference not in {pipeline.name for pipeline in pipelines}:
            raise SpecError(
                ("scoring", "reference_pipeline"),
                f"{reference!r} is not a pipeline of this grid; grid pipelines are named like {pipelines[0].name!r}",
            )
        return pipelines


class RunAccepted(BaseModel):
    model_config = ConfigDict(json_schema_extra={"examples": [{"id": "run_0123456789abcdef", "status": "queued"}]})

    id: str
    status: RunStatus


class ProgressDetail(BaseModel):
    units_done: int = Field(description="Units (an epoch set × the pipelines sharing a first step) done.")
    units_total: int
    elapsed_s: float = Field(description="Time since the first unit started, in s.")
    eta_s: float | None = Field(description="Time left if the rest goes at the pace so far, in s.")


RUN_OUT_EXAMPLE: JsonDict = {
    "id": "run_0123456789abcdef",
    "study": "READ-01",
    "status": "running",
    "progress": 0.25,
    "error": None,
    "created_at": "2026-12-01T10:00:00Z",
    "started_at": "2026-12-01T10:00:01Z",
    "finished_at": None,
    "pipelines": ["raw", "hp0.1-avg"],
    "epoch_sets": ["es_3f9c0a1b7d2e4f60"],
}


class RunOut(BaseModel):
    model_config = ConfigDict(json_schema_extra={"examples": [RUN_OUT_EXAMPLE]})

    id: str
    study: str
    status: RunStatus
    progress: float = Field(ge=0.0, le=1.0, description="Share of units (epoch set × tree branch) done.")
    progress_detail: ProgressDetail | None = Field(None, description="While running: units done, total and ETA.")
    error: str | None
    created_at: datetime
    started_at: datetime | None
    finished_at: datetime | None
    pipelines: list[str] = Field(description="The pipeline names of the run, in order.")
    epoch_sets: list[str] = Field(description="The ids of the epoch sets the run scores.")


class RunPage(BaseModel):
    model_config = ConfigDict(json_schema_extra={"examples": [{"runs": [RUN_OUT_EXAMPLE], "next_cursor": None}]})

    runs: list[RunOut]
    next_cursor: str | None = Field(description="Pass as ?cursor= for the next page; null on the last page.")
