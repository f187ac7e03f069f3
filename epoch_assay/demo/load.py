"""Load the READ-01 demo into a running epoch-assay server, score it, and print what it shows.

Steps: create the study (an existing one is reused), upload every simulated subject as an
NPZ epoch-set file, start one run over all of them with the demo pipelines and a
tuning/held-out selection, wait for it, and print the ranking against the pipeline without
a high-pass and the held-out confirmation of the winner.
"""

import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import httpx
import numpy as np

from epoch_assay.answers import problem_detail
from epoch_assay.demo import faults
from epoch_assay.demo.scenario import (
    BACKGROUND_UV,
    CONGRUENT,
    DRIFT_UV,
    EFFECT_UV,
    EFFECT_WINDOW_S,
    INCONGRUENT,
    LOOSE_CHANNEL,
    LOOSE_CHANNEL_UV,
    N_SUBJECTS,
    NOISY_CHANNEL,
    NOISY_CHANNEL_UV,
    SESSION,
    STUDY_CODE,
    STUDY_TITLE,
    TRIALS_PER_CONDITION,
    has_faulty_electrodes,
    subject_id,
)
from epoch_assay.demo.show import ProgressBar, holdout_lines, ranking_lines
from epoch_assay.demo.simulate import CH_NAMES, SimulationConfig, simulate_subject
from epoch_assay.engine.io.npz import write_npz

REFERENCE_PIPELINE = "no-highpass"
# The demo uploads 1 s epochs: the high-pass runs on them by choice, and its entries say so.
HIGHPASS = {"step": "highpass", "cutoff_hz": 0.5, "method": "iir", "allow_short_epochs": True}
AVERAGE = {"step": "reference", "kind": "average"}
BAD_CHANNELS = {
    "step": "bad_channels",
    "criteria": {"near_silent": {}, "amplitude_outlier": {}, "partner_agreement": {}},
    "action": "interpolate",
}
BLINKS_BY_ICA = {"step": "ica", "method": "fastica", "n_components": 15, "seed": 0}
BASELINE = {"step": "baseline", "window_s": [-0.2, 0.0]}
DEMO_PIPELINES: list[dict[str, Any]] = [
    {"name": REFERENCE_PIPELINE, "steps": [AVERAGE]},
    {"name": "hp", "steps": [HIGHPASS, AVERAGE]},
    {"name": "hp-badch", "steps": [HIGHPASS, BAD_CHANNELS, AVERAGE]},
    {"name": "hp-badch-ica", "steps": [HIGHPASS, BAD_CHANNELS, BLINKS_BY_ICA, AVERAGE]},
    {"name": "hp-badch-baseline", "steps": [HIGHPASS, BAD_CHANNELS, AVERAGE, BASELINE]},
]

DEMO_SCORING: dict[str, Any] = {
    "conditions": [INCONGRUENT, CONGRUENT],
    "window_s": list(EFFECT_WINDOW_S),
    "alpha": 0.05,
    "correction": "fdr_bh",
    "reference_pipeline": REFERENCE_PIPELINE,
}
# Half the subjects choose the winner, the other half confirm it.
DEMO_SELECTION: dict[str, Any] = {"rule": "tuning_holdout", "split": {"fraction": 0.5, "seed": 3}}
DEMO_CONFIG = SimulationConfig(
    n_trials_per_condition=TRIALS_PER_CONDITION, drift_uv=DRIFT_UV, noise_uv=BACKGROUND_UV, effect_uv=EFFECT_UV
)

FAULT_STREAM = 99


class DemoLoadError(RuntimeError):
    """The server refused a demo request or the demo run failed."""


def write_demo_subject(folder: Path, index: int) -> Path:
    """The ``index``-th simulated subject of the scenario (faulty electrodes included) as an NPZ file in ``folder``."""
    epochs = simulate_subject(DEMO_CONFIG, index)
    if has_faulty_electrodes(index):
        data = epochs.data.copy()
        # A stream of its own, so the faults leave the simulator's components unchanged.
        rng = np.random.default_rng(np.random.SeedSequence(DEMO_CONFIG.seed, spawn_key=(index, FAULT_STREAM)))
        faults.add_white_noise(data, CH_NAMES.index(NOISY_CHANNEL), NOISY_CHANNEL_UV, rng)
        faults.decouple(data, CH_NAMES.index(LOOSE_CHANNEL), LOOSE_CHANNEL_UV, rng)
        epochs = epochs.with_changes(data=data)
    path = folder / f"{STUDY_CODE}_{subject_id(index)}_{SESSION}.npz"
    write_npz(epochs, path)
    return path


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
        epoch_set_ids = _upload_subjects(http, n_subjects)
        run_id = _start_run(http, epoch_set_ids)
        _wait_for_run(http, run_id, timeout_s, poll_interval_s)
        result = _expect(http.get(f"/v1/runs/{run_id}/result"), 200)
        out("")
        for line in [*ranking_lines(result), "", *holdout_lines(result)]:
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
    out(f"study {STUDY_CODE} created: {STUDY_TITLE}")


def _upload_subjects(http: httpx.Client, n_subjects: int) -> list[str]:
    ids = []
    bar = ProgressBar("simulate", n_subjects)
    with tempfile.TemporaryDirectory(prefix="epoch-assay-demo-") as folder:
        paths = []
        for index in range(1, n_subjects + 1):
            paths.append(write_demo_subject(Path(folder), index))
            bar.update(index, f"{index}/{n_subjects} subjects")
        bar.finish(f"{n_subjects} subjects, {TRIALS_PER_CONDITION} trials per condition")
        bar = ProgressBar("upload", n_subjects)
        for index, path in enumerate(paths, start=1):
            response = http.post(
                f"/v1/studies/{STUDY_CODE}/epoch-sets",
                files={"file": (path.name, path.read_bytes(), "application/octet-stream")},
                data={"subject": subject_id(index), "session": SESSION},
            )
            ids.append(_expect(response, 201, 200)["id"])
            bar.update(index, f"{index}/{n_subjects} epoch sets")
    bar.finish(f"{n_subjects} epoch sets stored")
    return ids


def _start_run(http: httpx.Client, epoch_set_ids: list[str]) -> str:
    body = {
        "study": STUDY_CODE,
        "epoch_sets": epoch_set_ids,
        "pipelines": DEMO_PIPELINES,
        "scoring": DEMO_SCORING,
        "selection": DEMO_SELECTION,
    }
    return _expect(http.post("/v1/runs", json=body), 202)["id"]


def _wait_for_run(http: httpx.Client, run_id: str, timeout_s: float, poll_interval_s: float) -> None:
    deadline = time.monotonic() + timeout_s
    bar = ProgressBar("run", 1.0)
    while True:
        run = _expect(http.get(f"/v1/runs/{run_id}"), 200)
        if run["status"] == "succeeded":
            bar.finish(f"{len(DEMO_PIPELINES)} pipelines scored")
            return
        if run["status"] == "failed":
            raise DemoLoadError(f"run {run_id} failed: {run.get('error') or 'the server gave no reason'}")
        if time.monotonic() >= deadline:
            raise TimeoutError(
                f"run {run_id} is still {run['status']} after {timeout_s:.0f} s; "
                f"follow it with GET /v1/runs/{run_id} or raise the timeout"
            )
        detail = run.get("progress_detail") or {}
        eta = f", about {detail['eta_s']:.0f} s left" if detail.get("eta_s") is not None else ""
        bar.update(run.get("progress") or 0.0, f"{run['status']}{eta}")
        time.sleep(poll_interval_s)


def _expect(response: httpx.Response, *statuses: int) -> dict[str, Any]:
    """The JSON body of ``response``; DemoLoadError with the server's problem detail otherwise."""
    if response.status_code in statuses:
        return response.json()
    request = response.request
    raise DemoLoadError(
        f"{request.method} {request.url.path} answered {response.status_code}: {problem_detail(response)}"
    )
