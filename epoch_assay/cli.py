"""The ``epoch-assay`` command: serve, api, worker, migrate, demo."""

import argparse
import logging
import os
import subprocess
import sys
import time
from pathlib import Path

import httpx

from service.settings import Settings


def _settings(args: argparse.Namespace) -> Settings:
    """Settings from flags where given, else from EPOCH_ASSAY_* variables, else defaults."""
    given = {"data_dir": args.data_dir, "database_url": args.database_url}
    return Settings(**{key: value for key, value in given.items() if value is not None})


def _add_storage_flags(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--data-dir", type=Path, help="folder for the SQLite database and blobs (EPOCH_ASSAY_DATA_DIR)")
    parser.add_argument("--database-url", help="SQLAlchemy database URL (EPOCH_ASSAY_DATABASE_URL)")


def _add_server_flags(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1)")
    parser.add_argument("--port", type=int, default=8000, help="port to listen on (default 8000)")
    _add_storage_flags(parser)


def _prepare(settings: Settings) -> None:
    from service.storage.migrate import upgrade_to_head

    settings.data_dir.mkdir(parents=True, exist_ok=True)
    upgrade_to_head(settings.resolved_database_url)


def _storage_argv(settings: Settings) -> list[str]:
    return ["--data-dir", str(settings.data_dir), "--database-url", settings.resolved_database_url]


def _serve_api(settings: Settings, host: str, port: int) -> None:
    import uvicorn

    from service.app import create_app

    uvicorn.run(create_app(settings), host=host, port=port, log_level="info")


def cmd_api(args: argparse.Namespace) -> int:
    settings = _settings(args)
    _prepare(settings)
    _serve_api(settings, args.host, args.port)
    return 0


def cmd_serve(args: argparse.Namespace) -> int:
    settings = _settings(args)
    _prepare(settings)
    worker = subprocess.Popen([sys.executable, "-m", "epoch_assay", "worker", *_storage_argv(settings)])
    try:
        _serve_api(settings, args.host, args.port)
    finally:
        worker.terminate()
        worker.wait(timeout=60)
    return 0


def cmd_worker(args: argparse.Namespace) -> int:
    from worker.runner import Worker

    Worker(_settings(args)).run_forever()
    return 0


def cmd_migrate(args: argparse.Namespace) -> int:
    settings = _settings(args)
    _prepare(settings)
    print(f"database at the newest schema: {settings.resolved_database_url}")
    return 0


def _wait_until_healthy(base_url: str, server: subprocess.Popen, timeout_s: float = 120.0) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if server.poll() is not None:
            raise SystemExit(f"the server exited with code {server.returncode} before it was ready")
        try:
            if httpx.get(f"{base_url}/healthz", timeout=2.0).status_code == 200:
                return
        except httpx.HTTPError:
            pass
        time.sleep(0.3)
    raise SystemExit(f"the server at {base_url} did not become healthy within {timeout_s:.0f} s")


def cmd_demo(args: argparse.Namespace) -> int:
    from demo.load import load_demo

    settings = _settings(args)
    base_url = f"http://{args.host}:{args.port}"
    server = subprocess.Popen(
        [sys.executable, "-m", "epoch_assay", "serve", "--host", args.host, "--port", str(args.port),
         *_storage_argv(settings)]
    )
    try:
        _wait_until_healthy(base_url, server)
        run_id = load_demo(base_url, n_subjects=args.subjects)
        print(f"\nResult:        {base_url}/v1/runs/{run_id}/result")
        print(f"API reference: {base_url}/docs")
        if args.once:
            return 0
        print("The service keeps running; press Ctrl-C to stop it.")
        server.wait()
    except KeyboardInterrupt:
        pass
    finally:
        if server.poll() is None:
            server.terminate()
            server.wait(timeout=60)
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="epoch-assay", description="Score EEG preprocessing pipelines.")
    commands = parser.add_subparsers(dest="command", required=True)

    serve = commands.add_parser("serve", help="the API plus one embedded worker process")
    _add_server_flags(serve)
    serve.set_defaults(handler=cmd_serve)

    api = commands.add_parser("api", help="the API alone (run workers separately)")
    _add_server_flags(api)
    api.set_defaults(handler=cmd_api)

    worker = commands.add_parser("worker", help="a worker process that runs queued jobs")
    _add_storage_flags(worker)
    worker.set_defaults(handler=cmd_worker)

    migrate = commands.add_parser("migrate", help="bring the database to the newest schema")
    _add_storage_flags(migrate)
    migrate.set_defaults(handler=cmd_migrate)

    demo = commands.add_parser("demo", help="serve, load the simulated demo study and score it")
    _add_server_flags(demo)
    demo.add_argument("--subjects", type=int, default=6, help="number of simulated subjects (default 6)")
    demo.add_argument("--once", action="store_true", help="stop the service after the demo run")
    demo.set_defaults(handler=cmd_demo)
    return parser


def main(argv: list[str] | None = None) -> int:
    logging.basicConfig(level=os.environ.get("EPOCH_ASSAY_LOG_LEVEL", "INFO"),
                        format="%(asctime)s %(levelname)s %(name)s: %(message)s")
    args = build_parser().parse_args(argv)
    return args.handler(args)
