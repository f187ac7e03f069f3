"""The whole result document of a run, its version, and the conversion of documents stored earlier."""

from typing import Any

from pydantic import Field

from epoch_assay.engine.document.entry import ResultEntry
from epoch_assay.engine.document.multiverse import (
    CacheCounts,
    FactorEffectsResult,
    PipelineGroupResult,
    RankingEntry,
    SelectionOutcome,
)
from epoch_assay.engine.document.values import DocumentModel
from epoch_assay.engine.scoring_spec import ScoringSpec

# 1: the first stored form. 2: every key always written (null where not applicable) and step params
# carry their step name, so that the document validates against one typed schema.
RESULT_SCHEMA_VERSION = 2


class Seeds(DocumentModel):
    """Seeds of the random generators of the run."""

    bootstrap: int | None = Field(description="Seed of the bootstrap; null without a bootstrap.")


class RunProvenance(DocumentModel):
    """What produced the result: software versions and hashes of every input."""

    software: dict[str, str] = Field(description="Version of each package (and python, engine), by name.")
    scoring_hash: str = Field(description="SHA-256 of the scoring spec's canonical JSON, hex.")
    pipeline_hashes: dict[str, str] = Field(description="SHA-256 of each pipeline's canonical JSON spec, by name.")
    epoch_set_sha256: dict[str, str] = Field(description="SHA-256 of each epoch set's stored file, by id.")
    seeds: Seeds = Field(description="Seeds of the random generators.")


class RunResultDocument(DocumentModel):
    """Everything a run found: one entry per pipeline × epoch set, then the comparison across subjects."""

    schema_version: int = Field(description=f"Version of this document's layout; {RESULT_SCHEMA_VERSION} today.")
    run: str = Field(description="Id of the run.")
    study: str = Field(description="Code of the study.")
    scoring: ScoringSpec = Field(description="The scoring spec of the run, defaults filled in.")
    provenance: RunProvenance
    results: list[ResultEntry] = Field(description="For each epoch set in order, one entry per pipeline in run order.")
    group: list[PipelineGroupResult] | None = Field(
        None, description="Group level, one entry per pipeline in run order."
    )
    cache: CacheCounts | None = Field(None, description="Step-cache lookups of the run.")
    ranking: list[RankingEntry] | None = Field(
        None, description="Every pipeline, best first, against the reference pipeline."
    )
    factor_effects: FactorEffectsResult | None = Field(
        None, description="Grid runs: mixed-model effects of each factor; null for listed pipelines."
    )
    selection: SelectionOutcome | None = Field(None, description="The winner by the run's selection rule, if any.")


def upgrade_document(stored: dict[str, Any]) -> RunResultDocument:
    """Read a stored result document of any schema version as the current model.

    Version 1 omitted ``error`` on scored entries and the score on failed ones (both now null),
    and stored each step's ``params`` without its ``step`` name, which is put back here.
    Raises ``pydantic.ValidationError`` when ``stored`` is not a result document.
    """
    if stored.get("schema_version") == 1:
        stored = {
            **stored,
            "schema_version": RESULT_SCHEMA_VERSION,
            "results": [
                {
                    **entry,
                    "provenance": [
                        {**record, "params": {"step": record["step"], **record["params"]}}
                        for record in entry.get("provenance", [])
                    ],
                }
                for entry in stored.get("results", [])
            ],
        }
    return RunResultDocument.model_validate(stored)
