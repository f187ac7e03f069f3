"""The report's figures, drawn with matplotlib (Agg, no display) from the records of ``summary``.

Each function returns a ``matplotlib.figure.Figure`` built without pyplot, so figures made in
concurrent requests share no global state; ``figure_bytes`` renders one as PNG or SVG.
"""

import io
from collections.abc import Sequence
from typing import Literal

import matplotlib

matplotlib.use("Agg")

from matplotlib.figure import Figure
from matplotlib.ticker import PercentFormatter

from service.report.palette import (
    CONDITION_COLOURS,
    INK,
    MIST,
    REFERENCE_COLOUR,
    pipeline_colour,
)
from service.report.summary import Arrival, KeptCounts, RankingRow, SmeSummary, TimeCourse

FigureFormat = Literal["png", "svg"]
WIDTH_IN = 7.5
PNG_DPI = 110
FONT_SIZE = 10


def plain_text(label: str) -> str:
    """A user's label (pipeline, condition, epoch set) drawn as written, never as mathtext.

    Matplotlib reads text holding a pair of unescaped ``$`` as mathtext, and a label such as
    ``$\\frac$`` fails to parse, which would fail every drawing of the figure; an escaped ``\\$`` is
    drawn as a plain dollar sign (matplotlib.text.Text._preprocess_math). Escaping, rather than
    turning ``text.parse_math`` off through rcParams, keeps figures free of global state.
    """
    return label.replace("$", r"\$")


REFERENCE_LABEL = "reference"
PIPELINES_LABEL = "pipelines"


def _figure(height_in: float, ncols: int = 1) -> tuple[Figure, list]:
    figure = Figure(figsize=(WIDTH_IN, height_in), layout="constrained")
    axes = figure.subplots(1, ncols, squeeze=False)[0]
    for ax in axes:
        ax.tick_params(labelsize=FONT_SIZE)
        ax.spines[["top", "right"]].set_visible(False)
    return figure, list(axes)


def ranking_figure(rows: Sequence[tuple[str, float, float, float, bool]], *, description: str) -> Figure:
    """One point and interval per pipeline, first row at the top; the reference in INK with a diamond.

    ``rows`` are (name, estimate, ci_low, ci_high, is_reference), shares in [0, 1], already in
    the order to show; ``description`` says what point and bar are. The reference is drawn as its own errorbar container (label "reference"),
    the others as one container (label "pipelines"), so their data can be read back.
    """
    ranked = [RankingRow(*row) for row in rows]
    figure, (ax,) = _figure(1.2 + 0.45 * max(len(ranked), 1))
    positions = list(range(len(ranked)))[::-1]
    for is_reference, colour, marker, label in (
        (False, pipeline_colour(0), "o", PIPELINES_LABEL),
        (True, REFERENCE_COLOUR, "D", REFERENCE_LABEL),
    ):
        chosen = [(y, row) for y, row in zip(positions, ranked, strict=False) if row.is_reference == is_reference]
        if not chosen:
            continue
        ys = [y for y, _ in chosen]
        xs = [row.estimate for _, row in chosen]
        below = [row.estimate - row.ci_low for _, row in chosen]
        above = [row.ci_high - row.estimate for _, row in chosen]
        ax.errorbar(
            xs,
            ys,
            xerr=[below, above],
            fmt=marker,
            color=colour,
            ecolor=colour,
            elinewidth=2.2,
            capsize=4,
            markersize=7,
            label=label,
        )
    ax.set_yticks(
        positions,
        [plain_text(f"{row.name} (reference)" if row.is_reference else row.name) for row in ranked],
        fontsize=FONT_SIZE,
    )
    ax.set_ylim(-0.7, len(ranked) - 0.3)
    ax.set_xlim(0.0, 1.0)
    ax.xaxis.set_major_formatter(PercentFormatter(xmax=1.0))
    ax.set_xlabel(f"Significant channels (% of scored)\n{description}", fontsize=FONT_SIZE)
    ax.grid(axis="x", color=MIST, linewidth=0.6)
    ax.set_title("Pipelines ranked by the share of significant channels", fontsize=FONT_SIZE + 1, loc="left")
    return figure


def time_course_figure(courses: Sequence[TimeCourse], window_s: tuple[float, float], reference: str) -> Figure:
    """The significant fraction over time per pipeline, with the scoring window shaded."""
    figure, (ax,) = _figure(3.4)
    ax.axvspan(window_s[0] * 1e3, window_s[1] * 1e3, color=MIST, alpha=0.35, linewidth=0, label="scoring window")
    others = 0
    for course in courses:
        if course.pipeline == reference:
            colour, width, label = REFERENCE_COLOUR, 2.4, plain_text(f"{course.pipeline} (reference)")
        else:
            colour, width, label = pipeline_colour(others), 1.6, plain_text(course.pipeline)
            others += 1
        ax.plot(course.times_s * 1e3, course.fraction, color=colour, linewidth=width, label=label)
    ax.axvline(0.0, color=INK, linewidth=0.8, linestyle=":")
    ax.set_ylim(0.0, 1.0)
    ax.yaxis.set_major_formatter(PercentFormatter(xmax=1.0))
    ax.set_xlabel("Time after the event (ms)", fontsize=FONT_SIZE)
    ax.set_ylabel("Significant channels (%)", fontsize=FONT_SIZE)
    ax.set_title("Share of significant channels over time", fontsize=FONT_SIZE + 1, loc="left")
    ax.legend(fontsize=FONT_SIZE - 1, frameon=False, loc="upper left")
    return figure


def kept_figure(kept: Sequence[KeptCounts], conditions: Sequence[str]) -> Figure:
    """Left: mean trials kept per condition; right: mean EEG channels scored; one row per pipeline."""
    figure, (trials_ax, channels_ax) = _figure(1.4 + 0.45 * max(len(kept), 1), ncols=2)
    positions = list(range(len(kept)))[::-1]
    height = 0.8 / max(len(conditions), 1)
    for index, label in enumerate(conditions):
        offsets = [y + 0.4 - height * (index + 0.5) for y in positions]
        bars = trials_ax.barh(
            offsets,
            [item.trials[label] for item in kept],
            height=height,
            color=CONDITION_COLOURS[index % len(CONDITION_COLOURS)],
            label=plain_text(label),
        )
        trials_ax.bar_label(bars, fmt="%.0f", fontsize=FONT_SIZE - 2, padding=2)
    trials_ax.set_yticks(positions, [plain_text(item.pipeline) for item in kept], fontsize=FONT_SIZE)
    trials_ax.set_xlabel("Trials kept (mean per epoch set)", fontsize=FONT_SIZE)
    figure.legend(
        *trials_ax.get_legend_handles_labels(),
        fontsize=FONT_SIZE - 1,
        frameon=False,
        loc="outside lower center",
        ncols=len(conditions),
        title="condition",
        title_fontsize=FONT_SIZE - 1,
    )
    bars = channels_ax.barh(positions, [item.channels for item in kept], height=0.6, color=pipeline_colour(2))
    channels_ax.bar_label(bars, fmt="%.0f", fontsize=FONT_SIZE - 2, padding=2)
    channels_ax.set_yticks(positions, [""] * len(kept))
    channels_ax.set_xlabel("EEG channels scored (mean per epoch set)", fontsize=FONT_SIZE)
    figure.suptitle("What each pipeline kept", fontsize=FONT_SIZE + 1, x=0.02, horizontalalignment="left")
    return figure


def sme_figure(summaries: Sequence[SmeSummary]) -> Figure:
    """Median SME over channels per condition and pipeline, in µV (lower is more precise)."""
    conditions = list(dict.fromkeys(label for summary in summaries for label in summary.median_uv))
    figure, (ax,) = _figure(1.4 + 0.45 * max(len(summaries), 1))
    positions = list(range(len(summaries)))[::-1]
    height = 0.8 / max(len(conditions), 1)
    for index, label in enumerate(conditions):
        offsets = [y + 0.4 - height * (index + 0.5) for y in positions]
        values = [summary.median_uv.get(label, float("nan")) for summary in summaries]
        bars = ax.barh(
            offsets,
            values,
            height=height,
            color=CONDITION_COLOURS[index % len(CONDITION_COLOURS)],
            label=plain_text(label),
        )
        ax.bar_label(bars, fmt="%.2f", fontsize=FONT_SIZE - 2, padding=2)
    ax.set_yticks(positions, [plain_text(summary.pipeline) for summary in summaries], fontsize=FONT_SIZE)
    ax.set_xlabel("Standardised measurement error, median over channels (µV)", fontsize=FONT_SIZE)
    ax.set_title("Measurement precision per condition (lower is better)", fontsize=FONT_SIZE + 1, loc="left")
    figure.legend(
        *ax.get_legend_handles_labels(),
        fontsize=FONT_SIZE - 1,
        frameon=False,
        loc="outside lower center",
        ncols=len(conditions),
        title="condition",
        title_fontsize=FONT_SIZE - 1,
    )
    return figure


def figure_bytes(figure: Figure, fmt: FigureFormat) -> bytes:
    """The figure rendered as PNG or SVG; SVG carries no date and fixed element ids, so the same figure
    gives the same bytes."""
    buffer = io.BytesIO()
    metadata = {"Date": None} if fmt == "svg" else {"Software": None}
    with matplotlib.rc_context({"svg.hashsalt": "epoch-assay"}):
        figure.savefig(buffer, format=fmt, dpi=PNG_DPI, metadata=metadata, facecolor="white")
    return buffer.getvalue()


def arrival_figure(arrivals: Sequence[Arrival]) -> Figure:
    """Trials per condition (left axis) and channels (right axis) of each epoch set, in upload order."""
    figure, (ax,) = _figure(3.2)
    positions = list(range(len(arrivals)))
    conditions = list(dict.fromkeys(label for item in arrivals for label in item.trials))
    for index, label in enumerate(conditions):
        ax.plot(
            positions,
            [item.trials.get(label, 0) for item in arrivals],
            marker="os^v"[index % 4],
            color=CONDITION_COLOURS[index % len(CONDITION_COLOURS)],
            linewidth=1.6,
            label=plain_text(f"trials: {label}"),
        )
    # Headroom above the highest count, so the markers stay clear of the title.
    ax.set_ylim(0, 1.2 * max((max(item.trials.values(), default=0) for item in arrivals), default=0) + 1)
    ax.set_ylabel("Trials per condition", fontsize=FONT_SIZE)
    channels_ax = ax.twinx()
    channels_ax.plot(
        positions,
        [item.channels for item in arrivals],
        color=INK,
        linestyle="--",
        marker="D",
        linewidth=1.2,
        label="channels",
    )
    channels_ax.set_ylim(0, 1.2 * max(item.channels for item in arrivals) + 1)
    channels_ax.set_ylabel("Channels", fontsize=FONT_SIZE)
    ax.set_xticks(
        positions, [plain_text(item.label) for item in arrivals], rotation=45, ha="right", fontsize=FONT_SIZE - 1
    )
    ax.set_xlabel("Epoch sets in upload order", fontsize=FONT_SIZE)
    handles = ax.get_legend_handles_labels()[0] + channels_ax.get_legend_handles_labels()[0]
    ax.legend(handles=handles, fontsize=FONT_SIZE - 1, frameon=False, loc="lower left")
    ax.set_title("Epoch sets on arrival", fontsize=FONT_SIZE + 1, loc="left")
    return figure
