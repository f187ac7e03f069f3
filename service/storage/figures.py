"""Figures of run reports, kept once drawn (rows of ``run_figures``)."""

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.storage.models import RunFigure


def kept_figure(session: Session, run_id: str, name: str, fmt: str, renderer: str) -> bytes | None:
    """The bytes of the figure ``name`` of a run in ``fmt`` drawn by ``renderer``; None when none is kept."""
    return session.scalar(
        select(RunFigure.content).where(
            RunFigure.run_id == run_id, RunFigure.name == name, RunFigure.format == fmt, RunFigure.renderer == renderer
        )
    )


def keep_figure(session: Session, run_id: str, name: str, fmt: str, renderer: str, content: bytes) -> None:
    """Keep a drawn figure; when another request kept the same one first, theirs stays (both are equal)."""
    try:
        with session.begin_nested():
            session.add(RunFigure(run_id=run_id, name=name, format=fmt, renderer=renderer, content=content))
    except IntegrityError:
        pass
