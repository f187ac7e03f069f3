"""The result document of a run as typed models: what the worker stores, the API serves and the
reports read. ``run.RunResultDocument`` is the whole; ``entry`` one pipeline × epoch set;
``multiverse`` the comparison across pipelines and subjects; ``provenance`` what each step did."""

from epoch_assay.engine.document.entry import BootstrapSummary, ChannelScore, PipelineScore, ResultEntry, TimeCourse
from epoch_assay.engine.document.provenance import StepProvenance
from epoch_assay.engine.document.run import RESULT_SCHEMA_VERSION, RunResultDocument, upgrade_document

__all__ = [
    "RESULT_SCHEMA_VERSION",
    "BootstrapSummary",
    "ChannelScore",
    "PipelineScore",
    "ResultEntry",
    "RunResultDocument",
    "StepProvenance",
    "TimeCourse",
    "upgrade_document",
]
