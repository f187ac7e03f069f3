"""Webhooks: per-study URLs that receive a signed JSON event when a run succeeds or fails."""

import base64
import secrets
from typing import Annotated

from fastapi import APIRouter, Query, Response, status
from sqlalchemy import select
from sqlalchemy.orm import Session

from service.api.access import CallerDep
from service.api.deps import SessionDep
from service.api.idempotency import IdempotencyDep, canonical_fingerprint
from service.api.lookups import study_by_code
from service.api.responses import errors
from service.errors import NotFound
from service.schemas.webhooks import DeliveryOut, DeliveryPage, WebhookCreate, WebhookCreated, WebhookOut
from service.storage import outbox
from service.storage.ids import new_id
from service.storage.models import Study, Webhook, WebhookDelivery

router = APIRouter(prefix="/v1/studies/{code}/webhooks", tags=["webhooks"])
SIGNING = (
    " Each event is a POST with the JSON event as body, signed as the Standard Webhooks specification defines: "
    "headers `webhook-id`, `webhook-timestamp` (unix seconds) and "
    '`webhook-signature: v1,<base64 HMAC-SHA256(key, "<webhook-id>.<webhook-timestamp>.<body>")>`, '
    "where the key is the base64 after `whsec_` in the secret; any Standard Webhooks verifier checks it. "
    "Failed deliveries are retried with exponential backoff."
)
# Key length in bytes; Standard Webhooks asks for 24 to 64.
SECRET_KEY_BYTES = 32


def new_webhook_secret() -> str:
    """A signing secret in the Standard Webhooks form: ``whsec_`` and the base64 of random key bytes."""
    return "whsec_" + base64.b64encode(secrets.token_bytes(SECRET_KEY_BYTES)).decode()


def webhook_out(hook: Webhook, study_code: str) -> WebhookOut:
    return WebhookOut(
        id=hook.id,
        study=study_code,
        url=hook.url,
        events=hook.events,
        description=hook.description,
        created_at=hook.created_at,
    )


def _webhook_of(session: Session, study: Study, webhook_id: str) -> Webhook:
    hook = session.get(Webhook, webhook_id)
    if hook is None or hook.study_id != study.id:
        raise NotFound(
            f"no webhook {webhook_id!r} in study {study.code!r}; list them with GET /v1/studies/{study.code}/webhooks"
        )
    return hook


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    response_model=WebhookCreated,
    responses=errors(400, 401, 403, 404, 409, 413, 422),
    description="Register a webhook (write keys)." + SIGNING,
)
def create_webhook(
    code: str, body: WebhookCreate, session: SessionDep, caller: CallerDep, idempotency: IdempotencyDep
) -> Response:
    study = study_by_code(session, code, caller, "write")
    if (replayed := idempotency.replay(canonical_fingerprint(body.model_dump(mode="json")))) is not None:
        return replayed
    hook = Webhook(
        id=new_id("wh"),
        study_id=study.id,
        url=str(body.url),
        secret=new_webhook_secret(),
        events=list(body.events),
        description=body.description,
    )
    session.add(hook)
    session.flush()
    created = WebhookCreated(**webhook_out(hook, study.code).model_dump(), secret=hook.secret)
    return idempotency.remember(
        status.HTTP_201_CREATED, created, location=f"/v1/studies/{study.code}/webhooks/{hook.id}"
    )


@router.get("", response_model=list[WebhookOut], responses=errors(401, 403, 404))
def list_webhooks(code: str, session: SessionDep, caller: CallerDep) -> list[WebhookOut]:
    """The study's webhooks, oldest first (write keys; secrets are never shown again)."""
    study = study_by_code(session, code, caller, "write")
    hooks = session.scalars(
        select(Webhook).where(Webhook.study_id == study.id).order_by(Webhook.created_at, Webhook.id)
    )
    return [webhook_out(hook, study.code) for hook in hooks]


@router.get("/{webhook_id}", response_model=WebhookOut, responses=errors(401, 403, 404))
def get_webhook(code: str, webhook_id: str, session: SessionDep, caller: CallerDep) -> WebhookOut:
    """One webhook (write keys)."""
    study = study_by_code(session, code, caller, "write")
    return webhook_out(_webhook_of(session, study, webhook_id), study.code)


@router.delete("/{webhook_id}", status_code=status.HTTP_204_NO_CONTENT, responses=errors(401, 403, 404))
def delete_webhook(code: str, webhook_id: str, session: SessionDep, caller: CallerDep) -> Response:
    """Remove a webhook and its delivery log; pending events for it are dropped (write keys)."""
    study = study_by_code(session, code, caller, "write")
    session.delete(_webhook_of(session, study, webhook_id))
    return Response(status_code=status.HTTP_204_NO_CONTENT)


@router.get("/{webhook_id}/deliveries", response_model=DeliveryPage, responses=errors(401, 403, 404, 422))
def list_deliveries(
    code: str,
    webhook_id: str,
    session: SessionDep,
    caller: CallerDep,
    limit: Annotated[int, Query(ge=1, le=500, description="Newest deliveries to return.")] = 100,
) -> DeliveryPage:
    """The delivery log: each event sent to this webhook, newest first, with every attempt (write keys)."""
    study = study_by_code(session, code, caller, "write")
    hook = _webhook_of(session, study, webhook_id)
    rows = session.scalars(
        select(WebhookDelivery)
        .where(WebhookDelivery.webhook_id == hook.id)
        .order_by(WebhookDelivery.created_at.desc(), WebhookDelivery.id.desc())
        .limit(limit)
    )
    return DeliveryPage(
        deliveries=[
            DeliveryOut(
                id=row.id,
                event_id=row.event_id,
                event_type=row.event_type,
                run=row.run_id,
                status=row.status,
                attempts=row.attempts,
                next_attempt_at=row.next_attempt_at if row.status == outbox.PENDING else None,
                last_status_code=row.last_status_code,
                last_error=row.last_error,
                created_at=row.created_at,
                delivered_at=row.delivered_at,
                log=row.log,
            )
            for row in rows
        ]
    )
