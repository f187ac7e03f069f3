#!/usr/bin/env python3
"""A webhook receiver for a LIMS: check each event's signature, then append the run's summary to a CSV.

    export EPOCH_ASSAY_WEBHOOK_SECRET=whsec_...   # shown once, when the webhook was registered
    export EPOCH_ASSAY_URL=https://epoch-assay.lab.example EPOCH_ASSAY_TOKEN=ea_...   # a read key
    python webhook_to_csv.py --port 8765 --csv runs.csv

Events are signed as the Standard Webhooks specification defines (headers webhook-id,
webhook-timestamp, webhook-signature). Where the `standardwebhooks` package is installed
(pip install standardwebhooks) it checks them; otherwise this script checks them itself with
the standard library, the same way. A request whose signature does not match, or whose
timestamp is more than five minutes from this machine's clock, is refused with 401 and writes
nothing. Events
can arrive more than once (delivery is retried until answered 2xx), so an event id already in
the CSV is answered 200 and not written again.
"""

import argparse
import base64
import csv
import hashlib
import hmac
import json
import os
import sys
import time
import urllib.request
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from threading import Lock

TOLERANCE_S = 300
COLUMNS = [
    "event_id",
    "event",
    "run",
    "study",
    "status",
    "finished_at",
    "pipeline",
    "epoch_sets_scored",
    "mean_significant_fraction",
    "error",
]


def signature_is_valid_stdlib(secret: str, headers: dict[str, str], body: bytes, now: float) -> bool:
    """Standard Webhooks v1: ``webhook-signature`` holds ``v1,<base64 HMAC-SHA256>`` entries, space-separated,
    over ``<webhook-id>.<webhook-timestamp>.<body>`` with the base64 key after ``whsec_``."""
    try:
        message_id, timestamp = headers["webhook-id"], int(headers["webhook-timestamp"])
        key = base64.b64decode(secret.removeprefix("whsec_"))
    except (KeyError, ValueError):
        return False
    if abs(now - timestamp) > TOLERANCE_S:
        return False
    digest = hmac.new(key, f"{message_id}.{timestamp}.".encode() + body, hashlib.sha256).digest()
    expected = base64.b64encode(digest).decode()
    offered = [entry.split(",", 1) for entry in headers.get("webhook-signature", "").split()]
    return any(len(pair) == 2 and pair[0] == "v1" and hmac.compare_digest(pair[1], expected) for pair in offered)


def signature_is_valid(secret: str, headers: dict[str, str], body: bytes, now: float) -> bool:
    """Check the Standard Webhooks signature of ``body``; ``headers`` with lower-case names."""
    try:
        from standardwebhooks.webhooks import Webhook, WebhookVerificationError
    except ImportError:
        return signature_is_valid_stdlib(secret, headers, body, now)
    # The library reads the clock itself (and allows the same five minutes).
    try:
        Webhook(secret).verify(body, headers)
    except (WebhookVerificationError, ValueError):  # ValueError: a malformed header or secret
        return False
    return True


def fetch_result(base_url: str, token: str | None, run_id: str) -> dict:
    request = urllib.request.Request(
        f"{base_url.rstrip('/')}/v1/runs/{run_id}/result", headers={"Authorization": f"Bearer {token}"} if token else {}
    )
    with urllib.request.urlopen(request, timeout=60) as answer:
        return json.load(answer)


def summary_rows(event: dict, document: dict | None) -> list[dict]:
    """One row per pipeline for a succeeded run; one row without a pipeline for a failed one."""
    run = event["data"]["run"]
    base = {
        "event_id": event["id"],
        "event": event["type"],
        "run": run["id"],
        "study": run["study"],
        "status": run["status"],
        "finished_at": run["finished_at"],
        "error": run.get("error") or "",
    }
    if document is None:
        return [base | {"pipeline": "", "epoch_sets_scored": 0, "mean_significant_fraction": ""}]
    rows = []
    for pipeline in run["pipelines"]:
        fractions = [
            entry["significant_fraction"]
            for entry in document["results"]
            if entry["pipeline"] == pipeline and entry.get("significant_fraction") is not None
        ]
        mean = f"{sum(fractions) / len(fractions):.4f}" if fractions else ""
        rows.append(
            base | {"pipeline": pipeline, "epoch_sets_scored": len(fractions), "mean_significant_fraction": mean}
        )
    return rows


class CsvLog:
    """The CSV file, with the event ids already in it so a redelivered event is written once."""

    def __init__(self, path: Path) -> None:
        self.path, self.lock = path, Lock()
        self.seen = set()
        if path.exists():
            with path.open(newline="") as handle:
                self.seen = {row["event_id"] for row in csv.DictReader(handle)}

    def append(self, event_id: str, rows: list[dict]) -> None:
        with self.lock:
            if event_id in self.seen:
                return
            new_file = not self.path.exists()
            with self.path.open("a", newline="") as handle:
                writer = csv.DictWriter(handle, fieldnames=COLUMNS)
                if new_file:
                    writer.writeheader()
                writer.writerows(rows)
            self.seen.add(event_id)


def make_handler(secret: str, base_url: str, token: str | None, log: CsvLog) -> type[BaseHTTPRequestHandler]:
    class Handler(BaseHTTPRequestHandler):
        def do_POST(self) -> None:
            body = self.rfile.read(int(self.headers.get("Content-Length", 0)))
            headers = {name.lower(): value for name, value in self.headers.items()}
            if not signature_is_valid(secret, headers, body, time.time()):
                self._answer(401, "bad or stale signature")
                return
            event = json.loads(body)
            if event["id"] not in log.seen:
                run = event["data"]["run"]
                document = fetch_result(base_url, token, run["id"]) if run["status"] == "succeeded" else None
                log.append(event["id"], summary_rows(event, document))
            self._answer(200, "ok")

        def _answer(self, status: int, text: str) -> None:
            payload = text.encode()
            self.send_response(status)
            self.send_header("Content-Type", "text/plain")
            self.send_header("Content-Length", str(len(payload)))
            self.end_headers()
            self.wfile.write(payload)

        def log_message(self, format: str, *args: object) -> None:
            print(f"{self.address_string()} {format % args}", file=sys.stderr)

    return Handler


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--host", default="127.0.0.1")
    parser.add_argument("--port", type=int, default=8765, help="0 picks a free port")
    parser.add_argument("--csv", type=Path, default=Path("epoch-assay-runs.csv"))
    args = parser.parse_args()
    secret = os.environ.get("EPOCH_ASSAY_WEBHOOK_SECRET")
    if not secret:
        sys.exit("set EPOCH_ASSAY_WEBHOOK_SECRET to the secret shown when the webhook was registered")
    handler = make_handler(
        secret,
        os.environ.get("EPOCH_ASSAY_URL", "http://127.0.0.1:8000"),
        os.environ.get("EPOCH_ASSAY_TOKEN"),
        CsvLog(args.csv),
    )
    server = ThreadingHTTPServer((args.host, args.port), handler)
    print(f"listening on http://{args.host}:{server.server_address[1]}/", flush=True)
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
