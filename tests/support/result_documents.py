"""A real result document to build test documents from.

``result_document_v1.json`` was written by ``worker/run_job.py`` at schema_version 1 (commit 755cb11, before
the typed document) for a 2 × 2 grid (highpass none/1 Hz × trial rejection none/strict) on three simulated
subjects, with a bootstrap, a binned time course and a tuning/holdout selection; the strict level leaves too
few trials in some epoch sets, so it also has entries with an error. Step timings were set to 1 ms.
"""

import json
from pathlib import Path
from typing import Any

from epoch_assay.engine.document import ResultEntry, RunResultDocument, upgrade_document

V1_DOCUMENT = Path(__file__).with_name("result_document_v1.json")


def stored_v1_document() -> dict[str, Any]:
    """The schema_version 1 document as it is stored."""
    return json.loads(V1_DOCUMENT.read_text())


def result_document(**changes: Any) -> RunResultDocument:
    """The v1 document read as the current model, with ``changes`` to its top-level fields."""
    return upgrade_document(stored_v1_document()).model_copy(update=changes)


def scored_entry(**changes: Any) -> ResultEntry:
    """A scored entry of the document (with channels and a bootstrap), with ``changes``."""
    entry = next(entry for entry in result_document().results if entry.error is None)
    return entry.model_copy(update=changes)
