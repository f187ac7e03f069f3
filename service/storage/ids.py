"""Opaque string identifiers and UTC timestamps."""

import secrets
from datetime import UTC, datetime


def new_id(prefix: str) -> str:
    """An opaque id such as ``es_3f9c0a1b7d2e4f60``; the prefix says what it names."""
    return f"{prefix}_{secrets.token_hex(8)}"


def utc_now() -> datetime:
    """The current time, timezone-aware, in UTC."""
    return datetime.now(UTC)
