"""Queries on webhooks and their delivery log."""

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.storage.models import Webhook, WebhookDelivery


def webhooks_of_study(session: Session, study_id: str) -> list[Webhook]:
    """The study's webhooks, oldest first."""
    query = select(Webhook).where(Webhook.study_id == study_id).order_by(Webhook.created_at, Webhook.id)
    return list(session.scalars(query))


def webhook_in_study(session: Session, study_id: str, webhook_id: str) -> Webhook | None:
    """The webhook of this id if it belongs to the study."""
    hook = session.get(Webhook, webhook_id)
    return hook if hook is not None and hook.study_id == study_id else None


def latest_deliveries(session: Session, webhook_id: str, limit: int) -> list[WebhookDelivery]:
    """The webhook's ``limit`` newest deliveries, newest first."""
    query = (
        select(WebhookDelivery)
        .where(WebhookDelivery.webhook_id == webhook_id)
        .order_by(WebhookDelivery.created_at.desc(), WebhookDelivery.id.desc())
        .limit(limit)
    )
    return list(session.scalars(query))
