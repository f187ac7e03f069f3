"""``epoch-assay client``: upload, run with a live progress bar, status, result table, --json, report."""

import json

import pytest

from tests.service.api.helpers import SCORING
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import run_cli

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
