"""The figures of a run report, by stable name: ``ranking``, ``topomap-<pipeline>``, ``time-course``,
``kept`` and ``sme``. Only figures the result document has data for are listed."""

from collections.abc import Callable
from dataclasses import dataclass
from functools import partial

import matplotlib
from matplotlib.figure import Figure

from epoch_assay.engine.document import RunResultDocument
from service.report import figures, summary, topomaps

BEST_SHOWN = 2
# Raised whenever the drawing of any figure changes, so that figures kept by older code are drawn again.
FIGURES_VERSION = 1
#: The name kept figures are stored under: this code's figures version and the plotting library's.
RENDERER = f"figures-{FIGURES_VERSION}-matplotlib-{matplotlib.__version__}"


@dataclass(frozen=True)
class ReportFigure:
    """A figure of the report: its URL name, a title, a caption saying what it shows, and how to draw it."""

    name: str
    title: str
    caption: str
    draw: Callable[[], Figure]


def topomap_name(pipeline: str) -> str:
    return f"topomap-{pipeline}"


def run_figures(document: RunResultDocument) -> list[ReportFigure]:
    """Every figure available for ``document``, in report order."""
    found: list[ReportFigure] = []
    ranking = summary.ranking(document)
    reference = summary.reference_pipeline(document)
    if ranking.rows:
        found.append(
            ReportFigure(
                "ranking",
                "Ranking of pipelines",
                f"Point and bar: {ranking.description}. The reference pipeline is the dark "
                "diamond. Overlapping bars mean the data do not tell those pipelines apart.",
                lambda: figures.ranking_figure(ranking.rows, description=ranking.description),
            )
        )
    found.extend(_topomaps(document, reference))
    courses = summary.time_courses(document)
    if courses:
        window = document.scoring.window_s
        found.append(
            ReportFigure(
                "time-course",
                "Significant channels over time",
                "Share of channels significant at each time point, mean over epoch sets; shaded: the scoring window.",
                lambda: figures.time_course_figure(courses, window, reference),
            )
        )
    kept = summary.kept_counts(document)
    if kept:
        conditions = list(document.scoring.conditions)
        found.append(
            ReportFigure(
                "kept",
                "Trials and channels kept",
                "What each pipeline left to score, mean per epoch set: trials of each condition, and EEG channels.",
                lambda: figures.kept_figure(kept, conditions),
            )
        )
    sme = summary.sme_summaries(document)
    if sme:
        found.append(
            ReportFigure(
                "sme",
                "Standardised measurement error",
                "Median over channels of the standardised measurement error of the window mean, per condition, in µV, "
                "mean over epoch sets. It ignores the contrast but measures noise only: a step that removes the "
                "signal lowers it too, so a lower SME alone is no reason to prefer a pipeline.",
                lambda: figures.sme_figure(sme),
            )
        )
    return found


def _topomaps(document: RunResultDocument, reference: str) -> list[ReportFigure]:
    placed = {}
    for name in summary.pipeline_names(document):
        channel_map = summary.channel_map(document, name)
        located = None if channel_map is None else topomaps.place(channel_map)
        if located is not None:
            placed[name] = located
    limit = topomaps.shared_limit(list(placed.values()))
    found = []
    for name, located in placed.items():
        left_out = f" Not on the map (no 10-20 position): {', '.join(located.unplaced)}." if located.unplaced else ""
        found.append(
            ReportFigure(
                topomap_name(name),
                f"Scalp map: {name}",
                f"{topomaps.statistic_label(located.map.statistic_name)} per channel, mean over "
                f"{located.map.n_epoch_sets} epoch set(s); white dots: significant after "
                f"correction in at least half of them. All maps of this run share the colour scale ±{limit:.1f}."
                + left_out,
                partial(topomaps.topomap_figure, located, reference, limit),
            )
        )
    return found


def embedded_names(document: RunResultDocument, available: list[ReportFigure]) -> list[str]:
    """The figures the HTML page shows: all but the scalp maps, of which the reference and the best few."""
    shown_maps = {topomap_name(name) for name in summary.best_pipelines(summary.ranking(document).rows, BEST_SHOWN)}
    return [item.name for item in available if not item.name.startswith("topomap-") or item.name in shown_maps]
