"""Finding stored things by their public names, with the 404 every router gives."""

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.errors import NotFound
from service.storage.models import Run, Study


def study_by_code(session: Session, code: str) -> Study:
    study = session.scalar(select(Study).where(Study.code == code))
    if study is None:
        raise NotFound(f"no study with code {code!r}; list the studies with GET /v1/studies")
    return study


def run_by_id(session: Session, run_id: str) -> Run:
    run = session.get(Run, run_id)
    if run is None:
        raise NotFound(f"no run with id {run_id!r}; list runs with GET /v1/runs?study=CODE")
    return run
