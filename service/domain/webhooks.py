"""Registering a webhook: its secret is made here and shown once."""

import secrets

from sqlalchemy.orm import Session

from service.storage.ids import new_id
from service.storage.models import Study, Webhook


def register_webhook(session: Session, study: Study, url: str, events: list[str], description: str | None) -> Webhook:
    """Add and flush a webhook of the study with a new signing secret."""
    hook = Webhook(
        id=new_id("wh"),
        study_id=study.id,
        url=url,
        secret="whsec_" + secrets.token_hex(32),
        events=events,
        description=description,
    )
    session.add(hook)
    session.flush()
    return hook
