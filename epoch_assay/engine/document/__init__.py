"""The result document of a run as typed models: what the worker stores, the API serves and the
reports read. ``run.RunResultDocument`` is the whole; ``entry`` one pipeline × epoch set;
``multiverse`` the comparison across pipelines and subjects; each step's typed record is
``epoch_assay.engine.steps.StepProvenance``."""

from epoch_assay.engine.document.entry import (
    BootstrapSummary,
    ChannelScore,
    FractionInterval,
    MeanWelchT,
    PipelineScore,
    ResultEntry,
    SubsetSpread,
    TimeCourse,
)
from epoch_assay.engine.document.run import RESULT_SCHEMA_VERSION, RunResultDocument, upgrade_document
from epoch_assay.engine.steps import StepProvenance

__all__ = [
    "RESULT_SCHEMA_VERSION",
    "BootstrapSummary",
    "ChannelScore",
    "FractionInterval",
    "MeanWelchT",
    "PipelineScore",
    "ResultEntry",
    "RunResultDocument",
    "StepProvenance",
    "SubsetSpread",
    "TimeCourse",
    "upgrade_document",
]
