"""`epoch-assay demo --once`, the command behind `make demo`, end to end on a free loopback port."""

import subprocess
import sys

from tests.support.live import REPO_ROOT, free_port


def test_demo_loads_the_simulated_study_scores_it_and_prints_the_result_url(tmp_path):
    port = free_port()
    finished = subprocess.run(
        [
            sys.executable,
            "-m",
            "epoch_assay",
            "demo",
            "--once",
            "--subjects",
            "2",
            "--host",
            "127.0.0.1",
            "--port",
            str(port),
            "--data-dir",
            str(tmp_path),
        ],
        capture_output=True,
        text=True,
        timeout=600,
        cwd=REPO_ROOT,
    )
    assert finished.returncode == 0, finished.stdout[-3000:] + finished.stderr[-3000:]
    assert f"http://127.0.0.1:{port}/v1/runs/run_" in finished.stdout
    assert (tmp_path / "epoch-assay.sqlite3").is_file()
