"""Liveness of the service."""

from fastapi import APIRouter
from sqlalchemy import text

from service.api.deps import SessionDep

router = APIRouter(tags=["operations"])


@router.get("/healthz")
def healthz(session: SessionDep) -> dict[str, str]:
    """200 when the service answers and its database is reachable."""
    session.execute(text("SELECT 1"))
    return {"status": "ok"}
