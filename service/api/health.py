"""Liveness, readiness and metrics of the service."""

from datetime import timedelta

from fastapi import APIRouter, Request, Response
from prometheus_client import CONTENT_TYPE_LATEST, generate_latest
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import Session

from service.errors import ServiceUnavailable
from service.http.access import CallerDep
from service.http.deps import SessionDep, SettingsDep
from service.http.responses import errors
from service.schemas.operations import Health, Readiness
from service.storage import queue
from service.storage.db import ping
from service.storage.ids import utc_now

router = APIRouter(tags=["operations"])


def _database_reachable(session: Session) -> None:
    try:
        ping(session)
    except SQLAlchemyError as error:
        raise ServiceUnavailable(
            f"the database does not answer ({type(error).__name__}); check "
            "EPOCH_ASSAY_DATABASE_URL and that the database is up"
        ) from None


@router.get("/healthz", response_model=Health, responses=errors(503, unavailable="The database does not answer."))
def healthz(session: SessionDep) -> Health:
    """200 when the service answers and its database is reachable (no key needed)."""
    _database_reachable(session)
    return Health(status="ok")


@router.get(
    "/readyz",
    response_model=Readiness,
    responses=errors(503, unavailable="The database does not answer, or no worker was heard from recently."),
)
def readyz(session: SessionDep, settings: SettingsDep) -> Readiness:
    """200 when the database answers and a worker was heard from recently, so queued runs will run (no key needed)."""
    _database_reachable(session)
    workers = queue.workers_seen_since(session, utc_now() - timedelta(seconds=settings.worker_stale_seconds))
    if workers == 0:
        raise ServiceUnavailable(
            f"no worker was heard from in the last {settings.worker_stale_seconds:g} s, so "
            "queued runs would wait; start one with `epoch-assay worker` (or use `serve`)"
        )
    return Readiness(status="ready", workers=workers, queue_depth=queue.queue_depth(session))


@router.get(
    "/metrics",
    response_class=Response,
    responses={
        200: {
            "description": "Prometheus text format.",
            "content": {
                CONTENT_TYPE_LATEST.split(";")[0]: {
                    "schema": {"type": "string"},
                    "example": "# TYPE epoch_assay_queue_depth gauge\nepoch_assay_queue_depth 0.0\n",
                }
            },
        },
        **errors(401, 403),
    },
)
def metrics(request: Request, session: SessionDep, caller: CallerDep) -> Response:
    """Prometheus metrics: queue depth, runs by state, run durations, failures, HTTP requests (admin keys).

    The figures count every study, so a key of one study may not read them.
    """
    caller.require_admin()
    service_metrics = request.app.state.metrics
    service_metrics.refresh(session)
    return Response(generate_latest(service_metrics.registry), media_type=CONTENT_TYPE_LATEST)
