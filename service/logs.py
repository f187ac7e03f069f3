"""Structured logs: one JSON object per line, carrying the id of the request being served."""

import json
import logging
import sys
from contextvars import ContextVar
from datetime import UTC, datetime

request_id_var: ContextVar[str | None] = ContextVar("request_id", default=None)

# Attributes every LogRecord has; anything else was passed with ``extra=`` and goes into the JSON.
_STANDARD_ATTRIBUTES = set(vars(logging.LogRecord("", 0, "", 0, "", (), None))) | {"message", "asctime", "taskName"}


class JsonFormatter(logging.Formatter):
    """``{"ts", "level", "logger", "message", "request_id"?, …extra fields, "exc"?}`` on one line."""

    def format(self, record: logging.LogRecord) -> str:
        entry: dict[str, object] = {
            "ts": datetime.fromtimestamp(record.created, UTC).isoformat(timespec="milliseconds"),
            "level": record.levelname,
            "logger": record.name,
            "message": record.getMessage(),
        }
        request_id = request_id_var.get()
        if request_id is not None:
            entry["request_id"] = request_id
        entry.update({key: value for key, value in vars(record).items() if key not in _STANDARD_ATTRIBUTES})
        if record.exc_info:
            entry["exc"] = self.formatException(record.exc_info)
        return json.dumps(entry, default=str)


def configure_logging(level: str, log_format: str) -> None:
    """Send every logger (ours, uvicorn's, alembic's) to stderr in ``log_format`` ("json" or "text")."""
    handler = logging.StreamHandler(sys.stderr)
    if log_format == "json":
        handler.setFormatter(JsonFormatter())
    else:
        handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(name)s: %(message)s"))
    root = logging.getLogger()
    root.handlers[:] = [handler]
    root.setLevel(level.upper())
    for name in ("uvicorn", "uvicorn.error", "uvicorn.access", "alembic"):
        logging.getLogger(name).handlers[:] = []
        logging.getLogger(name).propagate = True
    # Alembic announces each of its plugins at INFO on every start; the migrations it runs stay visible.
    logging.getLogger("alembic.runtime.plugins").setLevel(logging.WARNING)
