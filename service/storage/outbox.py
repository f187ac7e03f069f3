"""The webhook outbox: one delivery row per (event, webhook), written with the run's outcome.

    pending ──attempt ok──▶ delivered
       │ ▲
       │ └── attempt failed, attempts left: wait base·2^(n−1) s (capped), then again
       └──── attempt failed on the last allowed attempt ──▶ failed

The row is added in the transaction that finishes the run (``queue._finish``), so an event
exists exactly when the outcome does: a crash cannot lose one or send one for an outcome
that was rolled back. A deliverer claims a due row with a short lease (one atomic UPDATE,
``FOR UPDATE SKIP LOCKED`` on PostgreSQL), so several worker processes never send the same
attempt twice at once; a deliverer that dies mid-send leaves the row to be retried after
the lease, so delivery is at least once and receivers deduplicate by the event id.
"""

import json
from collections.abc import Collection
from dataclasses import dataclass
from datetime import datetime, timedelta

from sqlalchemy import ColumnElement, and_, or_, select, update
from sqlalchemy.orm import Session

from service.storage.ids import new_id, utc_now
from service.storage.models import Run, Study, Webhook, WebhookDelivery

PENDING, DELIVERED, FAILED = "pending", "delivered", "failed"


def _iso(moment: datetime | None) -> str | None:
    return None if moment is None else moment.isoformat().replace("+00:00", "Z")


def record_run_event(session: Session, run_id: str, status: str, error: str | None, now: datetime) -> int:
    """Queue the event ``run.<status>`` for every webhook of the run's study that wants it; returns how many."""
    event_type = f"run.{status}"
    row = session.execute(select(Run, Study.code).join(Study, Run.study_id == Study.id).where(Run.id == run_id)).first()
    if row is None:
        return 0
    run, study_code = row
    hooks = [
        hook
        for hook in session.scalars(select(Webhook).where(Webhook.study_id == run.study_id))
        if event_type in hook.events
    ]
    if not hooks:
        return 0
    event_id = new_id("evt")
    payload = json.dumps(
        {
            "id": event_id,
            "type": event_type,
            "created_at": _iso(now),
            "data": {
                "run": {
                    "id": run.id,
                    "study": study_code,
                    "status": status,
                    "error": error,
                    "created_at": _iso(run.created_at),
                    "started_at": _iso(run.started_at),
                    "finished_at": _iso(now),
                    "pipelines": [pipeline["name"] for pipeline in run.spec.get("pipelines", [])],
                    "epoch_sets": list(run.spec.get("epoch_sets", [])),
                },
                "links": {"run": f"/v1/runs/{run.id}", "result": f"/v1/runs/{run.id}/result"},
            },
        },
        separators=(",", ":"),
    )
    session.add_all(
        WebhookDelivery(
            id=new_id("dlv"),
            webhook_id=hook.id,
            event_id=event_id,
            event_type=event_type,
            run_id=run.id,
            payload=payload,
            status=PENDING,
            attempts=0,
            next_attempt_at=now,
            log=[],
            created_at=now,
        )
        for hook in hooks
    )
    return len(hooks)


@dataclass(frozen=True)
class DueDelivery:
    id: str
    study_id: str
    event_id: str
    event_type: str
    url: str
    secret: str
    payload: str
    attempt: int


def _due(now: datetime) -> ColumnElement[bool]:
    return and_(
        WebhookDelivery.status == PENDING,
        WebhookDelivery.next_attempt_at <= now,
        or_(WebhookDelivery.lease_expires_at.is_(None), WebhookDelivery.lease_expires_at < now),
    )


def claim_delivery(session: Session, lease_seconds: float, busy_studies: Collection[str] = ()) -> DueDelivery | None:
    """Take the delivery that has been due longest for one attempt, or None; none of ``busy_studies``."""
    now = utc_now()
    candidate = (
        select(WebhookDelivery.id)
        .join(Webhook, Webhook.id == WebhookDelivery.webhook_id)
        .where(_due(now), Webhook.study_id.not_in(list(busy_studies)))
        .order_by(WebhookDelivery.next_attempt_at)
        .limit(1)
    )
    if session.get_bind().dialect.name == "postgresql":
        candidate = candidate.with_for_update(of=WebhookDelivery, skip_locked=True)
    row = session.execute(
        update(WebhookDelivery)
        .where(WebhookDelivery.id == candidate.scalar_subquery(), _due(now))
        .values(lease_expires_at=now + timedelta(seconds=lease_seconds), attempts=WebhookDelivery.attempts + 1)
        .returning(
            WebhookDelivery.id,
            WebhookDelivery.webhook_id,
            WebhookDelivery.event_id,
            WebhookDelivery.event_type,
            WebhookDelivery.payload,
            WebhookDelivery.attempts,
        )
    ).first()
    if row is None:
        return None
    hook = session.get(Webhook, row.webhook_id)
    # A delivery is deleted with its webhook (ON DELETE CASCADE), and the row is locked by this claim.
    assert hook is not None
    return DueDelivery(
        id=row.id,
        study_id=hook.study_id,
        event_id=row.event_id,
        event_type=row.event_type,
        url=hook.url,
        secret=hook.secret,
        payload=row.payload,
        attempt=row.attempts,
    )


@dataclass(frozen=True)
class AttemptOutcome:
    delivered: bool
    status_code: int | None
    error: str | None
    seconds: float


def record_attempt(
    session: Session,
    delivery: DueDelivery,
    outcome: AttemptOutcome,
    *,
    max_attempts: int,
    backoff_seconds: float,
    backoff_max_seconds: float,
) -> str:
    """Log one attempt and move the delivery on (delivered, failed, or pending until the next try); the new status."""
    now = utc_now()
    row = session.get(WebhookDelivery, delivery.id)
    if row is None:
        return FAILED
    entry = {
        "attempt": delivery.attempt,
        "at": _iso(now),
        "status_code": outcome.status_code,
        "error": outcome.error,
        "seconds": round(outcome.seconds, 4),
    }
    row.log = [*row.log, entry]
    row.last_status_code, row.last_error, row.lease_expires_at = outcome.status_code, outcome.error, None
    if outcome.delivered:
        row.status, row.delivered_at = DELIVERED, now
    elif delivery.attempt >= max_attempts:
        row.status = FAILED
        row.last_error = f"gave up after {delivery.attempt} attempts; last: {outcome.error}"
    else:
        wait = min(backoff_seconds * 2 ** (delivery.attempt - 1), backoff_max_seconds)
        row.next_attempt_at = now + timedelta(seconds=wait)
    return row.status
