"""Load on a real API process over loopback: requests per second and latency for reads and uploads.

Starts its own `epoch-assay api` on 127.0.0.1 (with an admin key made by the command line, as a
lab would), sends a bounded number of requests from a few threads, each phase also bounded in
time, prints the figures and stops the server. Reads mix three GETs (a run, a study's epoch sets,
a page of runs); uploads send distinct epoch-set files of 60 trials x 8 channels x 81 samples
(about 0.3 MB each). No worker runs, so the timings are the API's alone.

    python tests/benchmarks/bench_load.py          # 2,000 reads from 8 threads, 200 uploads from 4
    python tests/benchmarks/bench_load.py --quick  # tiny smoke run
"""

import argparse
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import httpx
import numpy as np

from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LiveService, start_service

STUDY = "LOAD-1"
SCORING = {"conditions": ["a", "b"], "window_s": [0.3, 0.5], "alpha": 0.05, "correction": "fdr_bh"}


@dataclass(frozen=True)
class Size:
    readers: int
    reads: int
    uploaders: int
    uploads: int
    max_seconds_per_phase: float


FULL = Size(readers=8, reads=2000, uploaders=4, uploads=200, max_seconds_per_phase=120.0)
QUICK = Size(readers=2, reads=40, uploaders=2, uploads=8, max_seconds_per_phase=30.0)


@dataclass(frozen=True)
class PhaseResult:
    name: str
    latencies_s: np.ndarray
    wall_s: float
    statuses: dict[int, int]

    def report(self) -> str:
        p50, p95, p99 = np.percentile(self.latencies_s, [50, 95, 99]) * 1e3
        return (
            f"  {self.name:<8} {len(self.latencies_s):6d} requests in {self.wall_s:6.2f} s : "
            f"{len(self.latencies_s) / self.wall_s:8.1f} req/s   p50 {p50:7.1f} ms   p95 {p95:7.1f} ms   "
            f"p99 {p99:7.1f} ms   statuses {dict(sorted(self.statuses.items()))}"
        )


def run_phase(
    name: str,
    service: LiveService,
    threads: int,
    requests: list[Callable[[httpx.Client], httpx.Response]],
    max_seconds: float,
) -> PhaseResult:
    """Send ``requests`` from ``threads`` threads (one client each) until done or ``max_seconds`` have passed."""
    latencies, statuses, lock = [], {}, threading.Lock()
    pending = iter(requests)
    deadline = time.monotonic() + max_seconds

    def drain() -> None:
        with service.client() as client:
            while time.monotonic() < deadline:
                with lock:
                    send = next(pending, None)
                if send is None:
                    return
                started = time.perf_counter()
                status = send(client).status_code
                elapsed = time.perf_counter() - started
                with lock:
                    latencies.append(elapsed)
                    statuses[status] = statuses.get(status, 0) + 1

    started = time.perf_counter()
    with ThreadPoolExecutor(max_workers=threads) as pool:
        for future in [pool.submit(drain) for _ in range(threads)]:
            future.result()
    return PhaseResult(name, np.array(latencies), time.perf_counter() - started, statuses)


def prepare(service: LiveService) -> str:
    """A study with one epoch set and one (queued) run to read; returns the run id."""
    with service.client() as admin:
        admin.post("/v1/studies", json={"code": STUDY, "title": "load"}).raise_for_status()
        epoch_set = admin.post(
            f"/v1/studies/{STUDY}/epoch-sets",
            data={"subject": "sub-00"},
            files={"file": ("e.npz", npz_bytes(small_epochs(seed=0)))},
        ).json()["id"]
        run = admin.post(
            "/v1/runs",
            json={
                "study": STUDY,
                "epoch_sets": [epoch_set],
                "scoring": SCORING,
                "pipelines": [{"name": "raw", "steps": []}],
            },
        )
        return run.json()["id"]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="tiny sizes, a smoke run")
    size = QUICK if parser.parse_args().quick else FULL
    files = [npz_bytes(small_epochs(seed=1 + index)) for index in range(size.uploads)]
    with tempfile.TemporaryDirectory() as folder:
        service = start_service(Path(folder), n_workers=0)
        try:
            run_id = prepare(service)
            reads = [
                lambda c: c.get(f"/v1/runs/{run_id}"),
                lambda c: c.get(f"/v1/studies/{STUDY}/epoch-sets"),
                lambda c: c.get("/v1/runs", params={"study": STUDY, "limit": 20}),
            ]
            uploads = [
                lambda c, content=content, i=i: c.post(
                    f"/v1/studies/{STUDY}/epoch-sets",
                    data={"subject": f"sub-{i + 1:03d}"},
                    files={"file": ("e.npz", content)},
                )
                for i, content in enumerate(files)
            ]
            print(
                f"load on one API process over loopback ({size.readers} reading threads, "
                f"{size.uploaders} uploading threads, {len(files[0]) / 1e6:.2f} MB per upload)"
            )
            results = [
                run_phase(
                    "reads",
                    service,
                    size.readers,
                    [reads[i % len(reads)] for i in range(size.reads)],
                    size.max_seconds_per_phase,
                ),
                run_phase("uploads", service, size.uploaders, uploads, size.max_seconds_per_phase),
            ]
        finally:
            service.stop()
    for result in results:
        print(result.report())
    if any(status >= 500 for result in results for status in result.statuses):
        sys.exit("the server answered with 5xx under load")


if __name__ == "__main__":
    main()
