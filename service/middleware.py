"""Per-request context: a request id (echoed as ``X-Request-ID``), an access log line, HTTP metrics."""

import logging
import re
import time
import uuid

from starlette.datastructures import MutableHeaders
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.logs import request_id_var
from service.metrics import ServiceMetrics

REQUEST_ID_HEADER = "X-Request-ID"
# A client's id is kept when it is short and plain; anything else is replaced, not echoed.
_ACCEPTABLE_ID = re.compile(r"^[A-Za-z0-9._:-]{1,128}$")
access_log = logging.getLogger("epoch_assay.access")


def _request_id(scope: Scope) -> str:
    for name, value in scope["headers"]:
        if name == b"x-request-id":
            given = value.decode("latin-1")
            if _ACCEPTABLE_ID.match(given):
                return given
    return uuid.uuid4().hex


class RequestContext:
    def __init__(self, app: ASGIApp, metrics: ServiceMetrics) -> None:
        self.app = app
        self.metrics = metrics

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        request_id = _request_id(scope)
        request_id_var.set(request_id)
        started = time.perf_counter()
        status = 500

        async def send_with_id(message: Message) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = message["status"]
                MutableHeaders(scope=message).append(REQUEST_ID_HEADER, request_id)
            await send(message)

        try:
            await self.app(scope, receive, send_with_id)
        finally:
            seconds = time.perf_counter() - started
            route = scope.get("route")
            # The route's template, not the raw path, so the metric has a bounded set of labels.
            template = getattr(route, "path", "unmatched")
            self.metrics.observe_request(scope["method"], template, status, seconds)
            access_log.info(
                "%s %s %d",
                scope["method"],
                scope["path"],
                status,
                extra={
                    "method": scope["method"],
                    "path": scope["path"],
                    "route": template,
                    "status": status,
                    "duration_ms": round(seconds * 1000, 2),
                    "caller": scope.get("state", {}).get("caller_id"),
                },
            )
