"""A run's report figures: drawn on first request and kept, then read back.

A succeeded run's result document never changes, so its figures are drawn once per format and
drawing code (``catalogue.RENDERER``); the report page, the figure route and every later request
read the kept bytes. Deleting the run deletes its figures (foreign key, on delete cascade).
"""

from sqlalchemy.orm import Session

from service.report.catalogue import RENDERER, ReportFigure
from service.report.figures import FigureFormat, figure_bytes
from service.storage.figures import keep_figure, kept_figure


def run_figure_bytes(session: Session, run_id: str, figure: ReportFigure, fmt: FigureFormat) -> bytes:
    """The bytes of ``figure`` of run ``run_id`` as ``fmt``, kept from an earlier request or drawn now and kept."""
    kept = kept_figure(session, run_id, figure.name, fmt, RENDERER)
    if kept is not None:
        return kept
    content = figure_bytes(figure.draw(), fmt)
    keep_figure(session, run_id, figure.name, fmt, RENDERER, content)
    return content
