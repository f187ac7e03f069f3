"""Registering a webhook: its secret is made here and shown once."""

import base64
import secrets

from sqlalchemy.orm import Session

from service.storage.ids import new_id
from service.storage.models import Study, Webhook

# Key length in bytes; Standard Webhooks asks for 24 to 64.
SECRET_KEY_BYTES = 32


def new_webhook_secret() -> str:
    """A signing secret in the Standard Webhooks form: ``whsec_`` and the base64 of random key bytes."""
    return "whsec_" + base64.b64encode(secrets.token_bytes(SECRET_KEY_BYTES)).decode()


def register_webhook(session: Session, study: Study, url: str, events: list[str], description: str | None) -> Webhook:
    """Add and flush a webhook of the study with a new signing secret."""
    hook = Webhook(
        id=new_id("wh"),
        study_id=study.id,
        url=url,
        secret=new_webhook_secret(),
        events=events,
        description=description,
    )
    session.add(hook)
    session.flush()
    return hook
