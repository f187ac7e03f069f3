"""``epoch-assay client``: upload, run with a live progress bar, status, result table, --json, report."""

import json

import pytest

from tests.service.api.helpers import SCORING
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import run_cli
from tests.support.recording_files import known_recording
from tests.support.session_files import write_brainvision

SPEC_PIPELINES = [{"name": "raw", "steps": []}, {"name": "lp30", "steps": [{"step": "lowpass", "cutoff_hz": 30.0}]}]


@pytest.fixture()
def cli(service, study):
    """``epoch-assay client ARGS`` with the server and a write key of the study from the environment."""
    env = {**service.env, "EPOCH_ASSAY_URL": service.base_url, "EPOCH_ASSAY_TOKEN": service.create_key("write", study)}
    return lambda *args: run_cli(["client", *args], env)


@pytest.fixture()
def uploaded(cli, study, tmp_path) -> str:
    path = tmp_path / "sub-01.npz"
    path.write_bytes(npz_bytes(small_epochs(seed=91)))
    finished = cli("upload", str(path), "--study", study, "--subject", "sub-01", "--json")
    assert finished.returncode == 0, finished.stderr
    return json.loads(finished.stdout)["id"]


@pytest.fixture()
def spec_file(study, uploaded, tmp_path):
    path = tmp_path / "run.json"
    path.write_text(
        json.dumps({"study": study, "epoch_sets": [uploaded], "pipelines": SPEC_PIPELINES, "scoring": SCORING})
    )
    return path


def test_run_wait_draws_a_progress_bar_on_stderr_and_a_table_on_stdout(cli, spec_file):
    finished = cli("run", str(spec_file), "--wait")
    assert finished.returncode == 0, finished.stderr
    assert "[" + "#" * 30 + "] 100%  succeeded" in finished.stderr
    rows = {line.split()[0]: line.split() for line in finished.stdout.splitlines()[2:]}
    assert set(rows) == {"raw", "lp30"} and rows["raw"][1] == "1"


def test_result_json_is_the_servers_result_document(cli, spec_file, client):
    run_id = cli("run", str(spec_file)).stdout.strip()
    assert cli("status", run_id, "--wait").returncode == 0
    printed = json.loads(cli("result", run_id, "--json").stdout)
    assert printed == client.get(f"/v1/runs/{run_id}/result").json()


def test_status_json_reports_the_run_state(cli, spec_file):
    run_id = cli("run", str(spec_file)).stdout.strip()
    cli("status", run_id, "--wait")
    state = json.loads(cli("status", run_id, "--json").stdout)
    assert (state["id"], state["status"], state["progress"]) == (run_id, "succeeded", 1.0)


def test_report_is_saved_as_an_html_file(cli, spec_file, tmp_path):
    run_id = cli("run", str(spec_file)).stdout.strip()
    cli("status", run_id, "--wait")
    output = tmp_path / "report.html"
    finished = cli("report", run_id, "-o", str(output))
    assert finished.returncode == 0, finished.stderr
    assert output.read_text().startswith("<!DOCTYPE html>")


def test_a_refused_request_exits_non_zero_with_the_servers_detail(cli):
    finished = cli("status", "run_0000000000000000")
    assert finished.returncode != 0
    assert "404" in finished.stderr and "no run with id" in finished.stderr


def test_upload_sends_a_vhdr_set_and_events_per_run_as_one_recording_session(cli, study, tmp_path):
    files = write_brainvision(known_recording(seed=92), tmp_path)
    epoching = {"tmin": -0.2, "tmax": 0.6, "conditions": {"a": ["Stimulus/S  1"], "b": ["Stimulus/S  2"]}}
    finished = cli(
        "upload",
        *(str(path) for path in files.values()),
        "--study",
        study,
        "--subject",
        "sub-01",
        "--epoching",
        json.dumps(epoching),
        "--channels",
        '{"rename": {"Pz": "POz"}}',
        "--json",
    )
    assert finished.returncode == 0, finished.stderr
    stored = json.loads(finished.stdout)
    assert (stored["source"], stored["file_format"], stored["conditions"]) == ("recording", "vhdr", {"a": 8, "b": 8})
    assert "[" + "#" * 30 + "] 100%  uploaded" in finished.stderr


def test_upload_sends_a_json_epoch_set_as_a_json_body(cli, study, tmp_path):
    epochs = small_epochs(seed=93)
    body = {
        "data": epochs.data.tolist(),
        "sfreq": epochs.sfreq,
        "tmin": epochs.tmin,
        "ch_names": list(epochs.ch_names),
        "labels": epochs.labels.tolist(),
    }
    path = tmp_path / "epochs.json"
    path.write_text(json.dumps(body))
    finished = cli("upload", str(path), "--study", study, "--subject", "sub-02", "--json")
    assert finished.returncode == 0, finished.stderr
    assert json.loads(finished.stdout)["n_trials"] == epochs.n_trials


def test_upload_of_several_files_without_epoching_is_refused_before_sending(cli, study, tmp_path):
    paths = [tmp_path / "a.npz", tmp_path / "b.npz"]
    for path in paths:
        path.write_bytes(npz_bytes(small_epochs(seed=94)))
    finished = cli("upload", *(str(p) for p in paths), "--study", study, "--subject", "sub-01")
    assert finished.returncode != 0 and "--epoching" in finished.stderr
