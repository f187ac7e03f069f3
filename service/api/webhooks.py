"""Webhooks: per-study URLs that receive a signed JSON event when a run succeeds or fails."""

from typing import Annotated

from fastapi import APIRouter, Query, Response, status
from sqlalchemy.orm import Session

from service.domain.webhooks import register_webhook
from service.errors import NotFound
from service.http.access import CallerDep
from service.http.deps import SessionDep, SettingsDep
from service.http.idempotency import IdempotencyDep, canonical_fingerprint
from service.http.lookups import study_by_code
from service.http.responses import errors
from service.schemas.webhooks import DeliveryOut, DeliveryPage, WebhookCreate, WebhookCreated, WebhookOut
from service.storage import outbox
from service.storage.models import Study, Webhook
from service.storage.webhooks import latest_deliveries, webhook_in_study, webhooks_of_study

router = APIRouter(prefix="/v1/studies/{code}/webhooks", tags=["webhooks"])
SIGNING = (
    " Each event is a POST with the JSON event as body, signed as the Standard Webhooks specification defines: "
    "headers `webhook-id`, `webhook-timestamp` (unix seconds) and "
    '`webhook-signature: v1,<base64 HMAC-SHA256(key, "<webhook-id>.<webhook-timestamp>.<body>")>`, '
    "where the key is the base64 after `whsec_` in the secret; any Standard Webhooks verifier checks it. "
    "Failed deliveries are retried with exponential backoff. "
    "The URL's host must resolve to public addresses "
    "only (not loopback, private, link-local, multicast or reserved) unless the operator allows its network."
)


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
    hook = webhook_in_study(session, study.id, webhook_id)
    if hook is None:
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
    code: str,
    body: WebhookCreate,
    session: SessionDep,
    settings: SettingsDep,
    caller: CallerDep,
    idempotency: IdempotencyDep,
) -> Response:
    study = study_by_code(session, code, caller, "write")
    if (replayed := idempotency.replay(canonical_fingerprint(body.model_dump(mode="json")))) is not None:
        return replayed
    hook = register_webhook(
        session,
        study,
        str(body.url),
        list(body.events),
        body.description,
        allowed_networks=settings.allowed_webhook_networks,
        max_per_study=settings.max_webhooks_per_study,
    )
    created = WebhookCreated(**webhook_out(hook, study.code).model_dump(), secret=hook.secret)
    return idempotency.remember(
        status.HTTP_201_CREATED, created, location=f"/v1/studies/{study.code}/webhooks/{hook.id}"
    )


@router.get("", response_model=list[WebhookOut], responses=errors(401, 403, 404))
def list_webhooks(code: str, session: SessionDep, caller: CallerDep) -> list[WebhookOut]:
    """The study's webhooks, oldest first (write keys; secrets are never shown again)."""
    study = study_by_code(session, code, caller, "write")
    return [webhook_out(hook, study.code) for hook in webhooks_of_study(session, study.id)]


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
    rows = latest_deliveries(session, hook.id, limit)
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
