"""The answers kept for Idempotency-Key retries."""

from datetime import datetime

from sqlalchemy import delete
from sqlalchemy.orm import Session

from service.storage.models import IdempotencyRecord


def kept_answer(session: Session, caller_id: str, key: str) -> IdempotencyRecord | None:
    """The answer kept for this caller's key, if any."""
    return session.get(IdempotencyRecord, (caller_id, key))


def forget_answers_before(session: Session, moment: datetime) -> None:
    """Delete every kept answer older than ``moment`` (of all callers)."""
    session.execute(delete(IdempotencyRecord).where(IdempotencyRecord.created_at < moment))
