"""Queries on studies."""

from sqlalchemy import ColumnElement, select
from sqlalchemy.orm import Session

from service.storage.models import Study


def study_with_code(session: Session, code: str) -> Study | None:
    """The study of this code, if there is one."""
    return session.scalar(select(Study).where(Study.code == code))


def studies_where(session: Session, visible: ColumnElement[bool]) -> list[Study]:
    """The studies matching ``visible`` (a filter on ``Study.id``), oldest first."""
    return list(session.scalars(select(Study).where(visible).order_by(Study.created_at, Study.id)))
