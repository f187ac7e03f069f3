"""The whole result document of a run, its version, and the conversion of documents stored earlier."""

from typing import Any

from pydantic import Field

from epoch_assay.engine.document.entry import STATISTIC_NAMES, ResultEntry
from epoch_assay.engine.document.multiverse import (
    CacheCounts,
    ExploratoryNote,
    FactorEffectsResult,
    PipelineGroupResult,
    RankingEntry,
    SelectionOutcome,
)
from epoch_assay.engine.document.values import DocumentModel
from epoch_assay.engine.provenance import upgrade_legacy_record
from epoch_assay.engine.scoring_spec import ScoringSpec

# 1: the first stored form. 2: every key always written (null where not applicable) and step params
# carry their step name, so that the document validates against one typed schema; the channel statistic
# is `statistic` with the entry's `statistic_name`; the bootstrap reports a subset mean and spread
# (fixed, equalized) or a percentile interval (all); entries carry the smooth score `mean_welch_t`.
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
    provenance: RunProvenance = Field(description="What produced the result: software versions, input hashes, seeds.")
    results: list[ResultEntry] = Field(description="For each epoch set in order, one entry per pipeline in run order.")
    group: list[PipelineGroupResult] | None = Field(
        default=None, description="Group level, one entry per pipeline in run order."
    )
    cache: CacheCounts | None = Field(default=None, description="Step-cache lookups of the run.")
    ranking: list[RankingEntry] | None = Field(
        default=None, description="Every pipeline, best first, against the reference pipeline."
    )
    factor_effects: FactorEffectsResult | None = Field(
        None, description="Grid runs: per-subject factor contrasts tested across subjects; null for listed pipelines."
    )
    selection: SelectionOutcome | None = Field(None, description="The winner by the run's selection rule, if any.")
    exploratory: ExploratoryNote | None = Field(
        None, description="Runs with a selection: the all-subject parts that are exploratory, and why; else null."
    )


def upgrade_document(stored: dict[str, Any]) -> RunResultDocument:
    """Read a stored result document of any schema version as the current model.

    Version 1 omitted ``error`` on scored entries and the score on failed ones (both now null),
    and stored every step's output fields in each step record (see
    ``epoch_assay.engine.provenance.upgrade_legacy_record``).
    Its channel ``t`` becomes ``statistic``, named after the run's test; its bootstrap
    ``median``/``ci_low``/``ci_high`` become, in modes fixed and equalized, ``spread_low``/
    ``spread_high`` with ``subset_mean`` null (a median is not the mean) and in mode all
    ``ci_low``/``ci_high``, null where the interval was BCa (the spec's ``ci`` then reads
    ``percentile``, the only interval offered for the fraction); ``mean_welch_t`` is null.
    Raises ``pydantic.ValidationError`` when ``stored`` is not a result document.
    """
    if stored.get("schema_version") == 1:
        scoring = dict(stored.get("scoring") or {})
        if scoring.get("bootstrap"):
            scoring["bootstrap"] = {**scoring["bootstrap"], "ci": "percentile"}
        statistic_name = STATISTIC_NAMES[scoring.get("test", "welch")]
        stored = {
            **stored,
            "schema_version": RESULT_SCHEMA_VERSION,
            "scoring": scoring,
            "results": [_entry_from_v1(entry, statistic_name) for entry in stored.get("results", [])],
        }
    return RunResultDocument.model_validate(stored)


def _entry_from_v1(entry: dict[str, Any], statistic_name: str) -> dict[str, Any]:
    """One result entry of schema version 1 in the names of version 2 (see :func:`upgrade_document`)."""
    upgraded = {
        **entry,
        "provenance": [upgrade_legacy_record(record) for record in entry.get("provenance", [])],
    }
    if entry.get("channels") is not None:
        upgraded["statistic_name"] = statistic_name
        upgraded["channels"] = [
            {("statistic" if key == "t" else key): value for key, value in channel.items()}
            for channel in entry["channels"]
        ]
    if entry.get("bootstrap") is not None:
        upgraded["bootstrap"] = _bootstrap_from_v1(entry["bootstrap"], entry.get("n_trials") or {})
    return upgraded


def _bootstrap_from_v1(boot: dict[str, Any], n_trials: dict[str, int]) -> dict[str, Any]:
    if boot["mode"] == "all":
        percentile = boot.get("ci") == "percentile"
        return {
            "mode": "all",
            "resamples": boot["resamples"],
            "trials_drawn": boot["trials_drawn"],
            "ci": "percentile",
            "ci_low": boot["ci_low"] if percentile else None,
            "ci_high": boot["ci_high"] if percentile else None,
        }
    k = boot["trials_per_condition"]
    return {
        "mode": boot["mode"],
        "resamples": boot["resamples"],
        "trials_per_condition": k,
        "share_of_trials_used": {label: k / count for label, count in n_trials.items() if count},
        "subset_mean": None,
        "spread_low": boot["ci_low"],
        "spread_high": boot["ci_high"],
    }
