"""A webhook receiver for tests: a standard-library HTTP server on loopback that records what it gets."""

import threading
import time
from dataclasses import dataclass
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer


@dataclass(frozen=True)
class Received:
    headers: dict[str, str]
    body: bytes


class Receiver:
    """Answers the first ``fail_first`` POSTs with 500 and the rest with 200, keeping every one.

    With ``hold``, each request is kept (and counted in ``received``) but answered only once
    ``hold`` is set: a receiver as slow as the test wants.
    """

    def __init__(self, port: int = 0, fail_first: int = 0, hold: threading.Event | None = None) -> None:
        self.fail_first = fail_first
        self.hold = hold
        self.received: list[Received] = []
        self._lock = threading.Lock()
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:
                body = self.rfile.read(int(self.headers.get("Content-Length", 0)))
                with receiver._lock:
                    receiver.received.append(
                        Received(headers={k.lower(): v for k, v in self.headers.items()}, body=body)
                    )
                    failing = len(receiver.received) <= receiver.fail_first
                if receiver.hold is not None:
                    receiver.hold.wait(timeout=120.0)
                self.send_response(500 if failing else 200)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *_args: object) -> None:
                pass

        self._server = ThreadingHTTPServer(("127.0.0.1", port), Handler)
        self._thread = threading.Thread(target=self._server.serve_forever, daemon=True)

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self._server.server_address[1]}/hook"

    def __enter__(self) -> "Receiver":
        self._thread.start()
        return self

    def __exit__(self, *_exc: object) -> None:
        if self.hold is not None:
            self.hold.set()
        self._server.shutdown()
        self._server.server_close()
        self._thread.join()

    def wait_for(self, count: int, timeout_s: float = 60.0) -> list[Received]:
        """The first ``count`` requests, once that many have arrived."""
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            with self._lock:
                if len(self.received) >= count:
                    return self.received[:count]
            time.sleep(0.05)
        raise TimeoutError(f"{len(self.received)} of {count} webhook requests arrived within {timeout_s} s")
