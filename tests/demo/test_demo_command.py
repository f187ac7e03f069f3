"""`epoch-assay demo --once`, the command behind `make demo`, end to end on a free loopback port.

The demo's scenario (epoch_assay/demo/scenario.py) has drifting electrodes, a noisy and a loose
electrode in every second session, blinks, and a baseline that adds noise; its run ranks five
pipelines against the one without a high-pass and confirms the winner on held-out subjects.
"""

import subprocess
import sys

import pytest

from tests.support.live import REPO_ROOT, free_port

N_SUBJECTS = 8


@pytest.fixture(scope="module")
def demo_output(tmp_path_factory: pytest.TempPathFactory) -> tuple[str, int, object]:
    data_dir = tmp_path_factory.mktemp("demo")
    port = free_port()
    command = [sys.executable, "-m", "epoch_assay", "demo", "--once", "--subjects", str(N_SUBJECTS)]
    finished = subprocess.run(
        [*command, "--host", "127.0.0.1", "--port", str(port), "--data-dir", str(data_dir)],
        capture_output=True,
        text=True,
        timeout=600,
        cwd=REPO_ROOT,
    )
    assert finished.returncode == 0, finished.stdout[-3000:] + finished.stderr[-3000:]
    return finished.stdout, port, data_dir


def _ranking(stdout: str) -> dict[str, list[str]]:
    """Ranking table rows by pipeline name: [rank, pipeline, mean, ci low, ci high, vs ref., p]."""
    rows = {}
    for line in stdout.splitlines():
        fields = line.replace("[", " ").replace("]", " ").replace(",", " ").split()
        if len(fields) >= 5 and fields[0].isdigit() and fields[1].startswith(("hp", "no-highpass")):
            rows[fields[1]] = fields
    return rows


def test_demo_output_is_short_with_ranking_table_held_out_check_and_report_url(demo_output):
    stdout, port, _ = demo_output
    assert len(stdout.splitlines()) < 60, stdout
    assert "pipeline" in stdout and len(_ranking(stdout)) == 5, stdout
    assert "held out sub-" in stdout
    assert f"http://127.0.0.1:{port}/v1/runs/run_" in stdout and "/report" in stdout


def test_demo_server_log_goes_to_a_file_under_the_data_folder(demo_output):
    stdout, _, data_dir = demo_output
    assert (data_dir / "demo-server.log").stat().st_size > 0
    assert "GET /v1/runs/" not in stdout


def test_demo_ranks_a_high_pass_above_no_high_pass_and_held_out_subjects_confirm_it(demo_output):
    stdout, _, _ = demo_output
    rows = _ranking(stdout)
    assert int(rows["hp"][0]) < int(rows["no-highpass"][0]), stdout
    assert "-> confirmed" in stdout, stdout


def test_demo_high_pass_beats_no_high_pass_with_adjusted_p_below_005(demo_output):
    stdout, _, _ = demo_output
    # Max-t under sign flips of whole subjects: with 8 subjects the smallest possible p is 2/256.
    assert "p adjusted" in stdout, stdout
    assert float(_ranking(stdout)["hp"][6].lstrip("<")) < 0.05, stdout
