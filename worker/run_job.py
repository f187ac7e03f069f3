"""One run from spec to result document: load each epoch set, apply each pipeline, score.

Nothing here knows of HTTP or the database: epoch sets come from a loader the runner hands in,
and progress goes out through a callback.
"""

import hashlib
import json
import platform
from collections.abc import Callable
from dataclasses import dataclass
from importlib.metadata import version
from typing import Any

from worker.engine import ENGINE_VERSION
from worker.engine.epochs import EpochSet
from worker.engine.errors import SpecError
from worker.engine.pipeline import PipelineSpec, apply_pipeline
from worker.engine.scoring import score_epochs
from worker.engine.scoring_spec import ScoringSpec

RESULT_SCHEMA_VERSION = 1
REPORTED_PACKAGES = ("epoch-assay", "numpy", "scipy", "mne", "pydantic")


@dataclass(frozen=True)
class EpochSetRef:
    """An epoch set of the run, as the runner knows it."""

    id: str
    subject: str
    session: str | None
    sha256: str


def _hash_json(value: Any) -> str:
    return hashlib.sha256(json.dumps(value, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


def software_versions() -> dict[str, str]:
    versions = {name: version(name) for name in REPORTED_PACKAGES}
    versions["python"] = platform.python_version()
    versions["engine"] = ENGINE_VERSION
    return versions


def score_unit(pipeline: PipelineSpec, epochs: EpochSet, scoring: ScoringSpec, ref: EpochSetRef) -> dict[str, Any]:
    """Apply one pipeline to one epoch set and score it; an entry of the result's ``results``.

    A spec that turns out impossible only now (a pipeline left too few trials, say) is
    reported in the entry's ``error`` rather than failing the whole run.
    """
    entry: dict[str, Any] = {
        "pipeline": pipeline.name, "pipeline_hash": pipeline.spec_hash(), "epoch_set": ref.id,
        "subject": ref.subject, "session": ref.session,
    }
    processed, records = apply_pipeline(pipeline, epochs)
    provenance = [record.to_json() for record in records]
    warnings = [warning for record in records for warning in record.warnings]
    try:
        entry.update(score_epochs(processed, scoring).to_json())
    except SpecError as error:
        entry["error"] = f"{'.'.join(str(part) for part in error.loc)}: {error.message}"
    entry.update(provenance=provenance, warnings=warnings)
    return entry


def execute_run(
    run_id: str,
    study_code: str,
    spec: dict[str, Any],
    epoch_sets: list[EpochSetRef],
    load: Callable[[EpochSetRef], EpochSet],
    on_progress: Callable[[float], None],
) -> dict[str, Any]:
    """Score every pipeline of ``spec`` on every epoch set; return the result document."""
    pipelines = [PipelineSpec.model_validate(item) for item in spec["pipelines"]]
    scoring = ScoringSpec.model_validate(spec["scoring"])
    total = len(epoch_sets) * len(pipelines)
    results = []
    for ref in epoch_sets:
        epochs = load(ref)
        for pipeline in pipelines:
            results.append(score_unit(pipeline, epochs, scoring, ref))
            on_progress(len(results) / total)
    return {
        "schema_version": RESULT_SCHEMA_VERSION,
        "run": run_id,
        "study": study_code,
        "scoring": scoring.model_dump(mode="json"),
        "provenance": {
            "software": software_versions(),
            "scoring_hash": _hash_json(scoring.model_dump(mode="json")),
            "pipeline_hashes": {pipeline.name: pipeline.spec_hash() for pipeline in pipelines},
            "epoch_set_sha256": {ref.id: ref.sha256 for ref in epoch_sets},
            "seeds": {"bootstrap": scoring.bootstrap.seed if scoring.bootstrap else None},
        },
        "results": results,
    }
