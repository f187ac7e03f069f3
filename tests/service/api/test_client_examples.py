"""The scripts in client_examples/ run green against a real server and worker."""

import csv
import json
import subprocess
import sys
import time

import httpx
import pytest

from tests.service.api.helpers import SCORING
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import REPO_ROOT, free_port, wait_for_run

EXAMPLES = REPO_ROOT / "client_examples"
SPEC = {
    "pipelines": [{"name": "raw", "steps": []}, {"name": "lp30", "steps": [{"step": "lowpass", "cutoff_hz": 30.0}]}],
    "scoring": SCORING,
}


@pytest.fixture()
def files(tmp_path):
    (tmp_path / "run.json").write_text(json.dumps(SPEC))
    (tmp_path / "sub-01.npz").write_bytes(npz_bytes(small_epochs(seed=81)))
    (tmp_path / "sub-02.npz").write_bytes(npz_bytes(small_epochs(seed=82)))
    return tmp_path


def _env(service, token: str) -> dict[str, str]:
    return {**service.env, "EPOCH_ASSAY_URL": service.base_url, "EPOCH_ASSAY_TOKEN": token}


def _after_session(service, study: str, files, token: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [
            sys.executable,
            str(EXAMPLES / "after_session.py"),
            "--study",
            study,
            "--session",
            "ses-01",
            "--spec",
            str(files / "run.json"),
            f"sub-01={files / 'sub-01.npz'}",
            f"sub-02={files / 'sub-02.npz'}",
        ],
        env=_env(service, token),
        capture_output=True,
        text=True,
        timeout=180,
    )


def _run_id(output: str) -> str:
    return next(line.split()[1] for line in output.splitlines() if line.startswith("run "))


def test_after_session_script_uploads_runs_and_prints_the_summary(service, study, files):
    finished = _after_session(service, study, files, service.create_key("write", study))
    assert finished.returncode == 0, finished.stderr
    lines = finished.stdout.splitlines()
    assert any(line.startswith("raw ") and line.split()[1] == "2" for line in lines)
    assert any(line.startswith("lp30 ") and line.split()[1] == "2" for line in lines)


def test_after_session_script_run_twice_starts_one_run(service, study, files):
    token = service.create_key("write", study)
    first, second = (_after_session(service, study, files, token) for _ in range(2))
    assert second.returncode == 0, second.stderr
    assert _run_id(first.stdout) == _run_id(second.stdout)
    uploads = [
        [line.split()[-1] for line in run.stdout.splitlines() if line.startswith("sub-")] for run in (first, second)
    ]
    assert uploads[0] == uploads[1] and len(uploads[0]) == 2


def test_curl_script_prints_the_result_csv_and_saves_the_report(service, study, files):
    finished = subprocess.run(
        [
            "sh",
            str(EXAMPLES / "run_with_curl.sh"),
            study,
            "sub-01",
            "ses-01",
            str(files / "sub-01.npz"),
            str(files / "run.json"),
        ],
        env=_env(service, service.create_key("write", study)),
        cwd=files,
        capture_output=True,
        text=True,
        timeout=180,
    )
    assert finished.returncode == 0, finished.stderr
    run_id = next(line.split()[1] for line in finished.stdout.splitlines() if line.startswith("run: "))
    rows = list(csv.DictReader(line for line in finished.stdout.splitlines() if "," in line))
    assert {row["pipeline"] for row in rows} == {"raw", "lp30"}
    assert (files / f"{run_id}.html").read_text().startswith("<!DOCTYPE html>")


@pytest.fixture()
def receiver(service, study, tmp_path):
    """The example receiver as its own process on a free loopback port: (url, csv path, webhook secret)."""
    with service.client() as http:
        # The webhook is registered first (the receiver needs its secret), so the receiver's port is chosen here.
        port = free_port()
        hook = http.post(f"/v1/studies/{study}/webhooks", json={"url": f"http://127.0.0.1:{port}/hook"}).json()
    csv_path = tmp_path / "runs.csv"
    env = _env(service, service.create_key("read", study)) | {"EPOCH_ASSAY_WEBHOOK_SECRET": hook["secret"]}
    process = subprocess.Popen(
        [sys.executable, str(EXAMPLES / "webhook_to_csv.py"), "--port", str(port), "--csv", str(csv_path)],
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
    )
    try:
        assert process.stdout.readline().startswith("listening on")
        yield f"http://127.0.0.1:{port}/hook", csv_path
    finally:
        process.terminate()
        process.wait(timeout=30)


def test_webhook_receiver_writes_the_summary_of_a_real_run_to_csv(client, study, receiver):
    _url, csv_path = receiver
    epoch_set = client.post(
        f"/v1/studies/{study}/epoch-sets",
        data={"subject": "sub-03"},
        files={"file": ("e.npz", npz_bytes(small_epochs(seed=83)))},
    ).json()["id"]
    run_id = client.post("/v1/runs", json={"study": study, "epoch_sets": [epoch_set], **SPEC}).json()["id"]
    assert wait_for_run(client, run_id)["status"] == "succeeded"
    deadline = time.monotonic() + 60
    while not csv_path.exists() and time.monotonic() < deadline:
        time.sleep(0.2)
    rows = list(csv.DictReader(csv_path.open()))
    assert [(row["run"], row["pipeline"], row["epoch_sets_scored"]) for row in rows] == [
        (run_id, "raw", "1"),
        (run_id, "lp30", "1"),
    ]
    fractions = {
        entry["pipeline"]: entry["significant_fraction"]
        for entry in client.get(f"/v1/runs/{run_id}/result").json()["results"]
    }
    assert {row["pipeline"]: float(row["mean_significant_fraction"]) for row in rows} == pytest.approx(fractions)


def test_webhook_receiver_refuses_a_bad_signature_and_writes_nothing(receiver):
    url, csv_path = receiver
    body = json.dumps({"id": "evt_forged", "type": "run.succeeded", "data": {"run": {}}})
    forged = {
        "webhook-id": "dlv_forged",
        "webhook-timestamp": str(int(time.time())),
        "webhook-signature": "v1," + "A" * 44,
    }
    answer = httpx.post(url, content=body, headers=forged)
    assert answer.status_code == 401
    assert not csv_path.exists()
