"""Registering a webhook: its target checked, the study's count bounded, its secret made here and shown once."""

import base64
import secrets
from ipaddress import IPv4Network, IPv6Network

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.errors import Conflict, Unprocessable
from service.storage.ids import new_id
from service.storage.models import Study, Webhook
from service.webhook_targets import TargetRefused, resolve

# Key length in bytes; Standard Webhooks asks for 24 to 64.
SECRET_KEY_BYTES = 32


def new_webhook_secret() -> str:
    """A signing secret in the Standard Webhooks form: ``whsec_`` and the base64 of random key bytes."""
    return "whsec_" + base64.b64encode(secrets.token_bytes(SECRET_KEY_BYTES)).decode()


def register_webhook(
    session: Session,
    study: Study,
    url: str,
    events: list[str],
    description: str | None,
    *,
    allowed_networks: tuple[IPv4Network | IPv6Network, ...],
    max_per_study: int,
) -> Webhook:
    """Add and flush a webhook of the study with a new signing secret.

    422 when the URL's host resolves to an address a webhook may not reach (see
    ``service.webhook_targets``); 409 when the study already has ``max_per_study`` webhooks.
    """
    try:
        resolve(url, allowed_networks)
    except TargetRefused as refused:
        raise Unprocessable(f"url: {refused}", errors=[{"loc": ["body", "url"], "msg": str(refused)}]) from None
    registered = session.scalar(select(func.count()).select_from(Webhook).where(Webhook.study_id == study.id)) or 0
    if registered >= max_per_study:
        raise Conflict(
            f"study {study.code!r} already has {registered} webhooks, the most allowed; delete one "
            f"(DELETE /v1/studies/{study.code}/webhooks/{{id}}) or ask the operator to raise "
            "EPOCH_ASSAY_MAX_WEBHOOKS_PER_STUDY"
        )
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
