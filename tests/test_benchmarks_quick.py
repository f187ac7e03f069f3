"""Every benchmark script still runs (at a tiny size) and prints its figures."""

import subprocess
import sys
from pathlib import Path

import pytest

BENCHMARKS = sorted((Path(__file__).parent / "benchmarks").glob("bench_*.py"))


@pytest.mark.parametrize("script", BENCHMARKS, ids=[path.stem for path in BENCHMARKS])
def test_benchmark_runs_quick_and_prints_figures(script):
    finished = subprocess.run(
        [sys.executable, str(script), "--quick"],
        capture_output=True,
        text=True,
        timeout=300,
        cwd=Path(__file__).parents[1],
    )
    assert finished.returncode == 0, finished.stderr
    assert any(char.isdigit() for char in finished.stdout), finished.stdout
