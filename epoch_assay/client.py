"""``epoch-assay client``: upload, run, status, result and report against a server, with an API key.

The server comes from ``--url`` or ``EPOCH_ASSAY_URL``; the key from ``EPOCH_ASSAY_TOKEN`` or
``--token-file`` (a file holding the token), never the command line, where every user of the
machine can read it in the process list. ``--token`` still works, with a warning, and will go.
Tables are for people; ``--json`` prints the server's JSON for scripts. While a run is going
(``run --wait``, ``status --wait``) a progress bar is drawn on stderr, so stdout stays clean.
"""

import argparse
import io
import json
import os
import sys
import time
from collections.abc import Iterator
from contextlib import ExitStack, contextmanager
from pathlib import Path
from typing import Any, BinaryIO, TextIO

import httpx

from epoch_assay.answers import problem_detail, summary_lines

DEFAULT_URL = "http://127.0.0.1:8000"
BAR_WIDTH = 30
FINISHED = ("succeeded", "failed")


def add_client_parser(commands: argparse._SubParsersAction) -> None:
    """Register ``client`` and its subcommands on the ``epoch-assay`` parser."""
    client = commands.add_parser("client", help="use a running server: upload, run, status, result, report")
    actions = client.add_subparsers(dest="client_command", required=True)

    upload = actions.add_parser(
        "upload",
        help="upload an epoch set (NPZ, MNE -epo.fif, JSON) or, with --epoching, the runs of a recording session",
        description="An epoch-set file goes to the study's epoch sets. With --epoching the files are a "
        "recording session (EDF/BDF, MNE raw FIF, VHDR .vhdr with its .eeg and .vmrk; several "
        "runs in order) and go to its recordings; see docs/inputs.md.",
    )
    upload.add_argument("file", type=Path, nargs="+", help="the file(s); a VHDR set is all three files")
    upload.add_argument("--study", required=True, help="study code")
    upload.add_argument("--subject", required=True, help="subject id, e.g. sub-01")
    upload.add_argument("--session", help="session label, e.g. ses-01")
    upload.add_argument("--epoching", help="recordings: the epoching spec, as JSON text or @file.json")
    upload.add_argument("--events", type=Path, action="append", default=[], help="recordings: an events.tsv per run")
    upload.add_argument("--channels", help="recordings: the JSON channel spec (rename, types, ...), text or @file.json")
    upload.add_argument("--channels-tsv", type=Path, help="recordings: a BIDS channels.tsv")
    upload.add_argument("--electrodes", type=Path, help="recordings: a BIDS electrodes.tsv (with --coordsystem)")
    upload.add_argument("--coordsystem", type=Path, help="recordings: the electrodes' BIDS coordsystem.json")
    upload.set_defaults(handler=cmd_upload)

    run = actions.add_parser("run", help="start a run from a JSON spec file (the body of POST /v1/runs)")
    run.add_argument("spec", type=Path)
    run.add_argument("--wait", action="store_true", help="follow the run with a progress bar, then print the result")
    run.set_defaults(handler=cmd_run)

    status = actions.add_parser("status", help="the state of a run")
    status.add_argument("run_id")
    status.add_argument("--wait", action="store_true", help="follow the run with a progress bar until it ends")
    status.set_defaults(handler=cmd_status)

    result = actions.add_parser("result", help="the result of a succeeded run, as a table per pipeline")
    result.add_argument("run_id")
    result.set_defaults(handler=cmd_result)

    report = actions.add_parser("report", help="save the run's HTML report")
    report.add_argument("run_id")
    report.add_argument("--output", "-o", type=Path, help="file to write (default <run id>.html)")
    report.set_defaults(handler=cmd_report)

    for action in (upload, run, status, result, report):
        action.add_argument(
            "--url",
            default=os.environ.get("EPOCH_ASSAY_URL", DEFAULT_URL),
            help=f"server URL (EPOCH_ASSAY_URL, default {DEFAULT_URL})",
        )
        action.add_argument(
            "--token-file",
            type=Path,
            help="file holding the API key (or set EPOCH_ASSAY_TOKEN); keys are not given on the command line",
        )
        action.add_argument("--token", help=argparse.SUPPRESS)
        action.add_argument("--json", action="store_true", help="print the server's JSON instead of a table")
        action.add_argument("--poll-seconds", type=float, default=1.0, help=argparse.SUPPRESS)


def api_token(args: argparse.Namespace) -> str | None:
    """The API key: from --token-file, else EPOCH_ASSAY_TOKEN, else the deprecated --token (with a warning)."""
    if args.token_file is not None:
        try:
            return args.token_file.read_text().strip() or None
        except OSError as error:
            raise SystemExit(f"epoch-assay client: cannot read the token file: {error.strerror}") from None
    if os.environ.get("EPOCH_ASSAY_TOKEN"):
        return os.environ["EPOCH_ASSAY_TOKEN"]
    if args.token:
        print(
            "epoch-assay client: --token is deprecated (other users can read it in the process list); "
            "set EPOCH_ASSAY_TOKEN or use --token-file",
            file=sys.stderr,
        )
    return args.token


def _http(args: argparse.Namespace) -> httpx.Client:
    token = api_token(args)
    headers = {"Authorization": f"Bearer {token}"} if token else {}
    return httpx.Client(base_url=args.url.rstrip("/"), headers=headers, timeout=120.0)


def _call(args: argparse.Namespace, method: str, path: str, *statuses: int, **request: Any) -> httpx.Response:
    """The answer to one request, or SystemExit with the server's problem detail."""
    try:
        with _http(args) as http:
            answer = http.request(method, path, **request)
    except httpx.HTTPError as error:
        raise SystemExit(f"epoch-assay client: cannot reach {args.url}: {error}") from None
    if answer.status_code not in statuses:
        raise SystemExit(f"epoch-assay client: {method} {path} answered {answer.status_code}: {problem_detail(answer)}")
    return answer


def _print_json(value: Any) -> None:
    print(json.dumps(value, indent=2))


def cmd_upload(args: argparse.Namespace) -> int:
    data = {"subject": args.subject} | ({"session": args.session} if args.session else {})
    recording = args.epoching is not None
    if not recording and len(args.file) > 1:
        raise SystemExit("epoch-assay client: an epoch set is one file; give --epoching to upload recording runs")
    with ExitStack() as stack:
        bar = UploadBar(sum(path.stat().st_size for path in _upload_paths(args)), sys.stderr)

        def opened(path: Path) -> BinaryIO:
            return stack.enter_context(bar.reading(path))

        if recording:
            path = f"/v1/studies/{args.study}/recordings"
            data |= {"epoching": _json_text(args.epoching, "--epoching")}
            files = [("file", (p.name, opened(p), "application/octet-stream")) for p in args.file]
            files += [("events", (p.name, opened(p), "text/tab-separated-values")) for p in args.events]
            if args.channels is not None:
                data |= {"channels": _json_text(args.channels, "--channels")}
            for field, file in (
                ("channels", args.channels_tsv),
                ("electrodes", args.electrodes),
                ("coordsystem", args.coordsystem),
            ):
                if file is not None:
                    files.append((field, (file.name, opened(file), "application/octet-stream")))
            answer = _call(args, "POST", path, 200, 201, data=data, files=files)
        elif args.file[0].read_bytes()[:64].lstrip().startswith(b"{"):
            body = json.loads(args.file[0].read_text()) | data
            answer = _call(args, "POST", f"/v1/studies/{args.study}/epoch-sets", 200, 201, json=body)
        else:
            files = [("file", (args.file[0].name, opened(args.file[0]), "application/octet-stream"))]
            answer = _call(args, "POST", f"/v1/studies/{args.study}/epoch-sets", 200, 201, data=data, files=files)
        bar.finish()
    stored = answer.json()
    if args.json:
        _print_json(stored)
    else:
        state = "uploaded" if answer.status_code == 201 else "already stored"
        counts = ", ".join(f"{label} {count}" for label, count in stored["conditions"].items())
        runs = f"  runs {len(stored['runs'])}" if stored.get("runs") else ""
        print(
            f"{stored['id']}  {state}  subject {stored['subject']}  trials: {counts}  channels {stored['n_channels']}"
            + runs
        )
    return 0


def _upload_paths(args: argparse.Namespace) -> list[Path]:
    optional = [args.channels_tsv, args.electrodes, args.coordsystem]
    paths = [*args.file, *args.events, *(path for path in optional if path is not None)]
    for path in paths:
        if not path.is_file():
            raise SystemExit(f"epoch-assay client: {path} is not a file")
    return paths


def _json_text(value: str, option: str) -> str:
    """The JSON text of an option given inline or as ``@file``, checked to parse."""
    text = Path(value[1:]).read_text() if value.startswith("@") else value
    try:
        json.loads(text)
    except ValueError as error:
        raise SystemExit(f"epoch-assay client: {option} is not JSON: {error}") from None
    return text


class UploadBar:
    """The progress bar of an upload, drawn on stderr as the files' bytes are read for sending."""

    def __init__(self, total_bytes: int, stream: TextIO) -> None:
        self.total, self.sent, self.stream = max(total_bytes, 1), 0, stream

    @contextmanager
    def reading(self, path: Path) -> Iterator[BinaryIO]:
        bar = self

        class Counted(io.BufferedReader):
            def read(self, size: int | None = -1) -> bytes:
                chunk = super().read(size)
                bar.advance(len(chunk))
                return chunk

        with Counted(io.FileIO(path)) as handle:
            yield handle

    def advance(self, n_bytes: int) -> None:
        self.sent += n_bytes
        self.stream.write("\r" + progress_bar(min(self.sent / self.total, 1.0), "uploading"))
        self.stream.flush()

    def finish(self) -> None:
        self.stream.write("\r" + progress_bar(1.0, "uploaded") + "\n")
        self.stream.flush()


def cmd_run(args: argparse.Namespace) -> int:
    try:
        body = json.loads(args.spec.read_text())
    except (OSError, ValueError) as error:
        raise SystemExit(f"epoch-assay client: cannot read the spec {args.spec}: {error}") from None
    run_id = _call(args, "POST", "/v1/runs", 202, json=body).json()["id"]
    if not args.wait:
        _print_json({"id": run_id, "status": "queued"}) if args.json else print(run_id)
        return 0
    print(f"run {run_id} queued", file=sys.stderr)
    state = follow(args, run_id)
    if state["status"] != "succeeded":
        raise SystemExit(f"epoch-assay client: run {run_id} failed: {state.get('error')}")
    return _show_result(args, run_id)


def cmd_status(args: argparse.Namespace) -> int:
    state = follow(args, args.run_id) if args.wait else _call(args, "GET", f"/v1/runs/{args.run_id}", 200).json()
    if args.json:
        _print_json(state)
    else:
        print(
            f"{state['id']}  {state['status']}  {state['progress']:.0%}"
            + (f"  error: {state['error']}" if state.get("error") else "")
        )
    return 0 if state["status"] != "failed" else 1


def cmd_result(args: argparse.Namespace) -> int:
    return _show_result(args, args.run_id)


def cmd_report(args: argparse.Namespace) -> int:
    answer = _call(args, "GET", f"/v1/runs/{args.run_id}/report", 200)
    output = args.output or Path(f"{args.run_id}.html")
    output.write_text(answer.text, encoding="utf-8")
    _print_json({"run": args.run_id, "report": str(output)}) if args.json else print(output)
    return 0


def _show_result(args: argparse.Namespace, run_id: str) -> int:
    document = _call(args, "GET", f"/v1/runs/{run_id}/result", 200).json()
    if args.json:
        _print_json(document)
        return 0
    scored = [entry for entry in document["results"] if entry.get("error") is None]
    for line in summary_lines(scored):
        print(line)
    for entry in document["results"]:
        if entry.get("error"):
            print(f"not scored: {entry['pipeline']} on {entry['subject']}: {entry['error']}")
    return 0


def follow(args: argparse.Namespace, run_id: str, stream: TextIO | None = None) -> dict[str, Any]:
    """Poll the run until it has succeeded or failed, drawing a progress bar on stderr; its last state."""
    stream = stream or sys.stderr
    while True:
        state = _call(args, "GET", f"/v1/runs/{run_id}", 200).json()
        stream.write("\r" + progress_bar(state["progress"], state["status"]))
        stream.flush()
        if state["status"] in FINISHED:
            stream.write("\n")
            return state
        time.sleep(args.poll_seconds)


def progress_bar(progress: float, status: str) -> str:
    """``[#########.....................]  30%  running`` for ``progress`` in [0, 1]."""
    filled = round(max(0.0, min(1.0, progress)) * BAR_WIDTH)
    return f"[{'#' * filled}{'.' * (BAR_WIDTH - filled)}] {progress:4.0%}  {status:<9}"
