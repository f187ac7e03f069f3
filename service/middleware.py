"""Per-request context (request id, access log line, HTTP metrics) and checks made before a body is read.

* :class:`RequestContext`: a request id (echoed as ``X-Request-ID``), an access log line, HTTP metrics.
* :class:`KeyBeforeBody`: a request with a body under ``/v1/`` needs a valid API key before its body is
  read, so an unauthenticated upload is refused without spooling it to disk.
* :class:`LocalOnly`: with access control off (``--open``), only loopback Host headers, and no
  cross-site requests that change anything (DNS rebinding, form posts from a visited web page).
"""

import ipaddress
import logging
import re
import time
import uuid

from anyio import to_thread
from starlette.datastructures import MutableHeaders
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.errors import problem
from service.http.access import MISSING_KEY, UNKNOWN_KEY
from service.logs import request_id_var
from service.metrics import ServiceMetrics
from service.storage.db import Database
from service.storage.keys import find_active_key

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


_BODY_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})
_API_PREFIX = "/v1/"


def _header(scope: Scope, name: bytes) -> str | None:
    for key, value in scope["headers"]:
        if key == name:
            return value.decode("latin-1")
    return None


class KeyBeforeBody:
    """401 for a request with a body under /v1/ whose API key is missing or unknown, before the body is read.

    The routes resolve the caller again (role, study) through their dependency; this only keeps
    the framework from reading, parsing and spooling an unauthenticated body first.
    """

    def __init__(self, app: ASGIApp, *, database: Database) -> None:
        self.app = app
        self.database = database

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http" and scope["method"] in _BODY_METHODS and scope["path"].startswith(_API_PREFIX):
            reason = await to_thread.run_sync(self._refusal, _header(scope, b"authorization"))
            if reason is not None:
                response = problem(
                    401, "unauthorized", "Unauthorized", reason, {"WWW-Authenticate": 'Bearer realm="epoch-assay"'}
                )
                await response(scope, receive, send)
                return
        await self.app(scope, receive, send)

    def _refusal(self, authorization: str | None) -> str | None:
        scheme, _, token = (authorization or "").partition(" ")
        if scheme.lower() != "bearer" or not token.strip():
            return MISSING_KEY
        with self.database.session() as session:
            return None if find_active_key(session, token.strip()) is not None else UNKNOWN_KEY


_SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})
_LOOPBACK_NAMES = frozenset({"localhost"})


def _is_loopback_host(host_header: str | None) -> bool:
    """True for a Host header naming this machine's loopback: localhost, 127.0.0.0/8 or [::1], any port."""
    if not host_header:
        return False
    host = host_header.strip().lower()
    if host.startswith("["):
        host = host[1 : host.find("]")] if "]" in host else host
    elif host.count(":") == 1:
        host = host.rsplit(":", 1)[0]
    if host in _LOOPBACK_NAMES or host.endswith(".localhost"):
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


class LocalOnly:
    """With access control off: 421 for a Host that is not loopback, 403 for cross-site changes.

    A web page the user visits can make the browser send requests to 127.0.0.1 (a form post needs
    no permission) or, through DNS rebinding, under its own host name. The Host header gives the
    second away; ``Sec-Fetch-Site`` (Fetch Metadata) or, from older browsers, an ``Origin`` that is
    not loopback gives the first away. Tools such as curl and httpx send neither, and pass.
    """

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http":
            refusal = self._refusal(scope)
            if refusal is not None:
                status, slug, title, detail = refusal
                await problem(status, slug, title, detail)(scope, receive, send)
                return
        await self.app(scope, receive, send)

    @staticmethod
    def _refusal(scope: Scope) -> tuple[int, str, str, str] | None:
        if not _is_loopback_host(_header(scope, b"host")):
            return (
                421,
                "not-local",
                "Misdirected request",
                "this server runs without access control and answers only requests addressed to "
                "localhost or a loopback address; open it as http://127.0.0.1:<port>/",
            )
        if scope["method"] in _SAFE_METHODS:
            return None
        fetch_site = _header(scope, b"sec-fetch-site")
        origin = _header(scope, b"origin")
        cross_site = fetch_site is not None and fetch_site not in ("same-origin", "none")
        if fetch_site is None and origin is not None and origin != "null":
            cross_site = not _is_loopback_host(origin.split("://", 1)[-1])
        elif fetch_site is None and origin == "null":
            cross_site = True
        if cross_site:
            return (
                403,
                "cross-site",
                "Cross-site request refused",
                "a web page of another site may not change this server, which runs without access control; "
                "use the API from a program or a page it serves",
            )
        return None
