"""Opaque keyset cursors: the (created_at, id) of the last row of a page, base64url-encoded JSON."""

import base64
import binascii
import json
from datetime import UTC, datetime

from service.errors import Unprocessable


def encode_cursor(created_at: datetime, row_id: str) -> str:
    raw = json.dumps([created_at.astimezone(UTC).isoformat(), row_id], separators=(",", ":")).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def decode_cursor(cursor: str) -> tuple[datetime, str]:
    """The position a cursor names; 422 for anything this server did not hand out."""
    try:
        raw = base64.urlsafe_b64decode(cursor + "=" * (-len(cursor) % 4))
        created_at, row_id = json.loads(raw)
        position = datetime.fromisoformat(created_at), str(row_id)
    except (binascii.Error, ValueError, TypeError, UnicodeDecodeError):
        raise Unprocessable(
            "cursor: not a cursor this server handed out; pass next_cursor of the previous page "
            "unchanged, or leave it out for the first page",
            errors=[{"loc": ["query", "cursor"], "msg": "invalid cursor"}],
        ) from None
    if position[0].tzinfo is None:
        position = position[0].replace(tzinfo=UTC), position[1]
    return position


def as_utc(moment: datetime) -> datetime:
    """A query bound given without a zone is taken as UTC (the zone of every stored time)."""
    return moment.replace(tzinfo=UTC) if moment.tzinfo is None else moment
