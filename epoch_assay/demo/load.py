"""Load the READ-01 demo into a running epoch-assay server, score it, and print a summary.

Steps: create the study (an existing one is reused), upload every simulated subject
as an NPZ epoch-set file, start one run over all of them with the demo pipelines,
wait for it, and print one line per pipeline.
"""

import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import httpx

from epoch_assay.answers import problem_detail, summary_lines
from epoch_assay.demo.scenario import (
    CONGRUENT,
    EFFECT_WINDOW_S,
    INCONGRUENT,
    N_SUBJECTS,
    SESSION,
    STUDY_CODE,
    STUDY_TITLE,
    subject_id,
)
from epoch_assay.demo.simulate import SimulationConfig, write_study_npz

DEMO_PIPELINES: list[dict[str, Any]] = [
    {"name": "raw", "steps": []},
    {
        "name": "hp0.1-avg",
        "steps": [{"step": "highpass", "cutoff_hz": 0.1}, {"step": "reference", "kind": "average"}],
    },
    {
        "name": "hp1-avg-baseline",
        "steps": [
            {"step": "highpass", "cutoff_hz": 1.0},
            {"step": "reference", "kind": "average"},
            {"step": "baseline", "window_s": [-0.2, 0.0]},
        ],
    },
    {
        "name": "lp30-mastoids",
        "steps": [
            {"step": "lowpass", "cutoff_hz": 30},
            {"step": "reference", "kind": "channels", "channels": ["TP9", "TP10"]},
        ],
    },
]

# Bootstrap draws 40 trials per condition: fewer than the 70 each subject has, so
# resamples differ from each other.
DEMO_SCORING: dict[str, Any] = {
    "conditions": [INCONGRUENT, CONGRUENT],
    "window_s": list(EFFECT_WINDOW_S),
    "alpha": 0.05,
    "correction": "fdr_bh",
    "bootstrap": {"trials_per_condition": 40, "resamples": 500, "seed": 7},
}


class DemoLoadError(RuntimeError):
    """The server refused a demo request or the demo run failed."""


def load_demo(
    base_url: str,
    *,
    n_subjects: int = N_SUBJECTS,
    out: Callable[[str], None] = print,
    timeout_s: float = 600.0,
    poll_interval_s: float = 1.0,
    client: httpx.Client | None = None,
) -> str:
    """Load, score and summarise the demo study on the server at ``base_url``; returns the run id.

    ``timeout_s`` bounds the wait for the run to finish (TimeoutError past it).
    ``client`` replaces the HTTP client, e.g. one with a test transport.
    """
    http = client if client is not None else httpx.Client(base_url=base_url, timeout=60.0)
    try:
        _create_study(http, out)
        epoch_set_ids = _upload_subjects(http, n_subjects, out)
        run_id = _start_run(http, epoch_set_ids)
        out(f"run {run_id} started with {len(DEMO_PIPELINES)} pipelines on {len(epoch_set_ids)} epoch sets")
        _wait_for_run(http, run_id, timeout_s, poll_interval_s, out)
        result = _expect(http.get(f"/v1/runs/{run_id}/result"), 200)
        for line in summary_lines(result["results"]):
            out(line)
        return run_id
    finally:
        if client is None:
            http.close()


def _create_study(http: httpx.Client, out: Callable[[str], None]) -> None:
    response = http.post("/v1/studies", json={"code": STUDY_CODE, "title": STUDY_TITLE})
    if response.status_code == 409:
        out(f"study {STUDY_CODE} exists already; adding to it")
        return
    _expect(response, 201)
    out(f"study {STUDY_CODE} created")


def _upload_subjects(http: httpx.Client, n_subjects: int, out: Callable[[str], None]) -> list[str]:
    ids = []
    with tempfile.TemporaryDirectory(prefix="epoch-assay-demo-") as folder:
        paths = write_study_npz(Path(folder), SimulationConfig(), n_subjects)
        for subject, path in zip([subject_id(i) for i in range(1, n_subjects + 1)], paths, strict=False):
            response = http.post(
                f"/v1/studies/{STUDY_CODE}/epoch-sets",
                files={"file": (path.name, path.read_bytes(), "application/octet-stream")},
                data={"subject": subject, "session": SESSION},
            )
            stored = _expect(response, 201, 200)
            state = "uploaded" if response.status_code == 201 else "already stored"
            out(f"{subject}: {state} as {stored['id']}")
            ids.append(stored["id"])
    return ids


def _start_run(http: httpx.Client, epoch_set_ids: list[str]) -> str:
    body = {"study": STUDY_CODE, "epoch_sets": epoch_set_ids, "pipelines": DEMO_PIPELINES, "scoring": DEMO_SCORING}
    return _expect(http.post("/v1/runs", json=body), 202)["id"]


def _wait_for_run(
    http: httpx.Client, run_id: str, timeout_s: float, poll_interval_s: float, out: Callable[[str], None]
) -> None:
    deadline = time.monotonic() + timeout_s
    while True:
        run = _expect(http.get(f"/v1/runs/{run_id}"), 200)
        if run["status"] == "succeeded":
            return
        if run["status"] == "failed":
            raise DemoLoadError(f"run {run_id} failed: {run.get('error') or 'the server gave no reason'}")
        if time.monotonic() >= deadline:
            raise TimeoutError(
                f"run {run_id} is still {run['status']} after {timeout_s:.0f} s; "
                f"follow it with GET /v1/runs/{run_id} or raise the timeout"
            )
        time.sleep(poll_interval_s)


def _expect(response: httpx.Response, *statuses: int) -> dict[str, Any]:
    """The JSON body of ``response``; DemoLoadError with the server's problem detail otherwise."""
    if response.status_code in statuses:
        return response.json()
    request = response.request
    raise DemoLoadError(
        f"{request.method} {request.url.path} answered {response.status_code}: {problem_detail(response)}"
    )
