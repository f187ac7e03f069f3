"""Limits on the size of a run, checked when it is created: steps per pipeline, pipelines × epoch sets."""

from collections.abc import Sequence

from epoch_assay.engine.pipeline import PipelineSpec
from service.errors import Unprocessable
from service.settings import Settings


def check_run_size(pipelines: Sequence[PipelineSpec], n_epoch_sets: int, settings: Settings) -> None:
    """422 when a pipeline has too many steps, or the run too many (pipeline, epoch set) pairs.

    Each pair adds a score to the result document, stored as one row; the product is bounded so a
    result stays within what the database keeps and a worker can hold.
    """
    for index, pipeline in enumerate(pipelines):
        if len(pipeline.steps) > settings.max_steps_per_pipeline:
            message = (
                f"pipeline {pipeline.name!r} has {len(pipeline.steps)} steps, more than the limit of "
                f"{settings.max_steps_per_pipeline} (EPOCH_ASSAY_MAX_STEPS_PER_PIPELINE)"
            )
            raise Unprocessable(message, errors=[{"loc": ["body", "pipelines", index, "steps"], "msg": message}])
    units = len(pipelines) * n_epoch_sets
    if units > settings.max_run_units:
        message = (
            f"the run would score {len(pipelines)} pipelines on {n_epoch_sets} epoch sets, {units} pairs, more than "
            f"the limit of {settings.max_run_units} (EPOCH_ASSAY_MAX_RUN_UNITS); split it over several runs"
        )
        raise Unprocessable(message, errors=[{"loc": ["body", "epoch_sets"], "msg": message}])
