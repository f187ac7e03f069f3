#!/usr/bin/env python3
"""Run on an acquisition PC after a session: upload its epoch sets, score them, print a summary.

    export EPOCH_ASSAY_URL=https://epoch-assay.lab.example EPOCH_ASSAY_TOKEN=ea_...
    python after_session.py --study READ-01 --session ses-01 --spec run.json sub-07=sub-07.npz

Every POST carries an Idempotency-Key made from what it sends, so a retry after a dropped
connection, or a second start of the script, never uploads twice or starts a second run.
Needs Python 3.11 and httpx (pip install httpx).
"""

import argparse
import hashlib
import json
import os
import sys
import time
from pathlib import Path

import httpx

RETRIES = 5
RETRY_STATUSES = {429, 502, 503, 504}


def request_with_retries(http: httpx.Client, method: str, path: str, *, key: str | None = None, **kwargs):
    """Send a request, retrying network errors and 429/5xx with exponential backoff (1, 2, 4 … s)."""
    headers = {"Idempotency-Key": key} if key else {}
    attempt = 0
    while True:
        attempt += 1
        try:
            answer = http.request(method, path, headers=headers, **kwargs)
            if answer.status_code not in RETRY_STATUSES:
                return answer
            reason = f"answered {answer.status_code}"
        except httpx.TransportError as error:
            reason = f"{type(error).__name__}: {error}"
        if attempt == RETRIES:
            sys.exit(f"{method} {path} failed {RETRIES} times; last: {reason}")
        wait = 2 ** (attempt - 1)
        print(f"{method} {path}: {reason}; retrying in {wait} s", file=sys.stderr)
        time.sleep(wait)


def expect(answer: httpx.Response, *statuses: int) -> dict:
    if answer.status_code not in statuses:
        sys.exit(f"{answer.request.method} {answer.request.url.path} answered {answer.status_code}: {answer.text}")
    return answer.json()


def upload(http: httpx.Client, study: str, subject: str, session: str, path: Path) -> str:
    content = path.read_bytes()
    key = "upload-" + hashlib.sha256(f"{study}/{subject}/{session}/".encode() + content).hexdigest()[:40]
    # The file is re-sent as bytes on each attempt (an open file would be read to its end by the first one).
    answer = request_with_retries(
        http,
        "POST",
        f"/v1/studies/{study}/epoch-sets",
        key=key,
        data={"subject": subject, "session": session},
        files={"file": (path.name, content, "application/octet-stream")},
    )
    stored = expect(answer, 200, 201)
    print(f"{subject}: {'uploaded' if answer.status_code == 201 else 'already there'} as {stored['id']}")
    return stored["id"]


def start_run(http: httpx.Client, study: str, epoch_sets: list[str], spec: dict) -> str:
    body = {"study": study, "epoch_sets": epoch_sets, **spec}
    key = "run-" + hashlib.sha256(json.dumps(body, sort_keys=True).encode()).hexdigest()[:40]
    return expect(request_with_retries(http, "POST", "/v1/runs", key=key, json=body), 202)["id"]


def wait(http: httpx.Client, run_id: str, timeout_s: float) -> dict:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        state = expect(request_with_retries(http, "GET", f"/v1/runs/{run_id}"), 200)
        if state["status"] in ("succeeded", "failed"):
            return state
        time.sleep(1.0)
    sys.exit(f"run {run_id} did not finish within {timeout_s:.0f} s; follow it with GET /v1/runs/{run_id}")


def print_summary(document: dict) -> None:
    """Per pipeline: epoch sets scored and the mean share of significant channels."""
    print(f"{'pipeline':<24} {'scored':>6} {'mean significant':>17}")
    for pipeline in document["provenance"]["pipeline_hashes"]:
        fractions = [
            entry["significant_fraction"]
            for entry in document["results"]
            if entry["pipeline"] == pipeline and entry.get("significant_fraction") is not None
        ]
        mean = f"{sum(fractions) / len(fractions):.2f}" if fractions else "-"
        print(f"{pipeline:<24} {len(fractions):>6} {mean:>17}")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("files", nargs="+", metavar="SUBJECT=FILE.npz")
    parser.add_argument("--study", required=True)
    parser.add_argument("--session", required=True)
    parser.add_argument("--spec", type=Path, required=True, help="JSON with 'pipelines' and 'scoring'")
    parser.add_argument("--url", default=os.environ.get("EPOCH_ASSAY_URL", "http://127.0.0.1:8000"))
    parser.add_argument("--token", default=os.environ.get("EPOCH_ASSAY_TOKEN"))
    parser.add_argument("--timeout", type=float, default=1800.0, help="seconds to wait for the run")
    args = parser.parse_args()
    spec = json.loads(args.spec.read_text())
    headers = {"Authorization": f"Bearer {args.token}"} if args.token else {}
    with httpx.Client(base_url=args.url, headers=headers, timeout=120.0) as http:
        pairs = [item.split("=", 1) for item in args.files]
        if any(len(pair) != 2 for pair in pairs):
            sys.exit("give each file as SUBJECT=FILE.npz, e.g. sub-07=sub-07.npz")
        ids = [upload(http, args.study, subject, args.session, Path(path)) for subject, path in pairs]
        run_id = start_run(http, args.study, ids, spec)
        print(f"run {run_id} started")
        state = wait(http, run_id, args.timeout)
        if state["status"] == "failed":
            sys.exit(f"run {run_id} failed: {state['error']}")
        print_summary(expect(request_with_retries(http, "GET", f"/v1/runs/{run_id}/result"), 200))
        print(f"report: {args.url}/v1/runs/{run_id}/report")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
