"""Cost of serving a stored result through the typed document, against handing the stored JSON back as text.

The route reads the stored text, parses it, validates it as a ``RunResultDocument`` (converting an older
schema_version) and serialises it again. The script builds a large document from the stored schema_version 1
document in tests/support (its scored entries repeated over many epoch sets, with 64 channels each), then
prints the seconds of each stage and the total as a multiple of parsing the JSON alone.

    python tests/benchmarks/bench_result_document.py          # 200 pipelines × epoch sets, 64 channels
    python tests/benchmarks/bench_result_document.py --quick  # 4 entries, a smoke run
"""

import argparse
import json
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from epoch_assay.engine.document import RunResultDocument, upgrade_document
from tests.support.result_documents import stored_v1_document

MB = 1_000_000


def timed(action: Callable[[], object], repeats: int) -> float:
    """The fastest of ``repeats`` runs of ``action``, in s."""
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        best = min(best, time.perf_counter() - start)
    return best


def large_document(n_entries: int, n_channels: int) -> dict[str, Any]:
    """The stored v1 document with ``n_entries`` scored entries of ``n_channels`` channels each."""
    document = stored_v1_document()
    scored = next(entry for entry in document["results"] if "error" not in entry)
    channel = scored["channels"][0]
    channels = [channel | {"name": f"E{index}"} for index in range(n_channels)]
    document["results"] = [
        scored | {"epoch_set": f"es_{index:016x}", "channels": channels} for index in range(n_entries)
    ]
    return document


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="a tiny document, to check that the script runs")
    args = parser.parse_args()
    n_entries, n_channels, repeats = (4, 8, 1) if args.quick else (200, 64, 3)
    v1_text = json.dumps(large_document(n_entries, n_channels))
    current: RunResultDocument = upgrade_document(json.loads(v1_text))
    v2_text = current.model_dump_json()
    print(f"{n_entries} entries × {n_channels} channels: {len(v2_text) / MB:.1f} MB of JSON; best of {repeats}")
    stored_v2, stored_v1 = json.loads(v2_text), json.loads(v1_text)
    parse = timed(lambda: json.loads(v2_text), repeats)
    validate = timed(lambda: upgrade_document(stored_v2), repeats)
    convert = timed(lambda: upgrade_document(stored_v1), repeats)
    serialise = timed(lambda: json.dumps(current.model_dump(mode="json")), repeats)
    served = parse + validate + serialise
    print(f"{'parse the stored JSON':<44} {parse:8.3f} s")
    print(f"{'validate as RunResultDocument (version 2)':<44} {validate:8.3f} s")
    print(f"{'convert and validate (version 1)':<44} {convert:8.3f} s")
    print(f"{'serialise for the answer':<44} {serialise:8.3f} s")
    print(f"{'served through the model, all stages':<44} {served:8.3f} s   {served / parse:5.1f} x parsing alone")


if __name__ == "__main__":
    main()
