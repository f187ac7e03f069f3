"""Self-contained HTML pages: inline CSS, figures as base64 data URIs, no scripts, fonts or links to load.

Every piece of text that comes from a client (study titles, pipeline names, subjects, warnings)
passes through ``html.escape``; the only markup is written here.
"""

import base64
import json
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from html import escape
from typing import Any
from urllib.parse import quote

from epoch_assay.engine.document import RunResultDocument
from epoch_assay.engine.document.run import RunProvenance
from service.report.catalogue import ReportFigure
from service.report.summary import verdict_facts, verdict_text

CSS = """
body { font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif;
       color: #1f1d3a; background: #fbfbfd; margin: 0; }
main { max-width: 1040px; margin: 0 auto; padding: 24px 28px 48px; }
h1 { font-size: 1.55em; margin: 0 0 4px; }
h2 { font-size: 1.2em; margin: 32px 0 8px; border-bottom: 2px solid #a9cbe8; padding-bottom: 3px; }
h3 { font-size: 1.02em; margin: 18px 0 6px; }
.sub { color: #4a4866; margin: 0 0 16px; }
.caution { background: #fff4e3; border-left: 4px solid #e8a33d; padding: 8px 12px; margin: 14px 0; }
.verdict { background: #eef4fb; border-left: 4px solid #3d7fc1; padding: 8px 12px; margin: 14px 0; }
table { border-collapse: collapse; margin: 6px 0 12px; font-size: 0.92em; }
th, td { text-align: left; padding: 4px 10px 4px 0; border-bottom: 1px solid #e1e1ea; vertical-align: top; }
th { color: #4a4866; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
code { font: 0.9em ui-monospace, "SFMono-Regular", Menlo, Consolas, monospace; background: #eef1f7;
       padding: 0 3px; border-radius: 3px; word-break: break-all; }
figure { margin: 12px 0 22px; background: #ffffff; border: 1px solid #e1e1ea; border-radius: 6px; padding: 10px; }
figure img { max-width: 100%; height: auto; display: block; }
figcaption { font-size: 0.9em; color: #4a4866; margin-top: 6px; }
.maps { display: flex; flex-wrap: wrap; gap: 12px; }
.maps figure { flex: 1 1 300px; margin: 0; }
.links { font-size: 0.85em; }
.bad { color: #a6401a; }
"""


@dataclass(frozen=True)
class LockedFacts:
    """The study's locked pipeline as the study page shows it."""

    name: str
    steps: list[dict[str, Any]]
    pipeline_hash: str
    locked_at: datetime
    source_run: str | None


@dataclass(frozen=True)
class ArrivalQuality:
    """Data quality of one epoch set as the locked pipeline found it on arrival (SME in µV)."""

    epoch_set: str
    subject: str
    session: str | None
    scored_at: datetime
    pipeline: str
    n_trials: dict[str, int]
    median_sme_uv: dict[str, float | None]
    channels_kept: int | None
    channels_uploaded: int | None
    error: str | None


@dataclass(frozen=True)
class EpochSetFacts:
    """An epoch set as the report lists it."""

    id: str
    subject: str
    session: str | None
    sha256: str
    n_channels: int
    sfreq: float
    conditions: dict[str, int]
    created_at: datetime


@dataclass(frozen=True)
class RunFacts:
    """The run around a result document: its state and times, and its epoch sets."""

    id: str
    study_code: str
    study_title: str
    status: str
    created_at: datetime
    finished_at: datetime | None
    pipelines: list[dict[str, Any]]
    epoch_sets: list[EpochSetFacts]


@dataclass(frozen=True)
class RunSummaryRow:
    """A run as the study page lists it."""

    id: str
    status: str
    created_at: datetime
    pipelines: list[str]
    n_epoch_sets: int
    error: str | None


def _page(title: str, body: str) -> str:
    return (
        f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f'<meta name="viewport" content="width=device-width, initial-scale=1">'
        # An empty inline icon, so browsers do not ask the server for /favicon.ico.
        f'<link rel="icon" href="data:,">'
        f"<title>{escape(title)}</title><style>{CSS}</style></head>"
        f"<body><main>{body}</main></body></html>\n"
    )


def _table(header: Sequence[str], rows: Sequence[Sequence[str]], numeric: Sequence[int] = ()) -> str:
    """A table from already escaped cells; columns in ``numeric`` are right-aligned."""
    head = "".join(f"<th>{cell}</th>" for cell in header)
    body = "".join(
        "<tr>"
        + "".join(f'<td class="num">{cell}</td>' if i in numeric else f"<td>{cell}</td>" for i, cell in enumerate(row))
        + "</tr>"
        for row in rows
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _when(moment: datetime | None) -> str:
    return "—" if moment is None else escape(moment.strftime("%Y-%m-%d %H:%M:%S UTC"))


def _code(text: str) -> str:
    return f"<code>{escape(text)}</code>"


def data_uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _figure(item: ReportFigure, png: bytes) -> str:
    stem = f"figures/{quote(item.name, safe='')}"
    return (
        f'<figure id="fig-{escape(item.name)}"><img src="{data_uri(png)}" alt="{escape(item.title)}">'
        f"<figcaption><strong>{escape(item.title)}.</strong> {escape(item.caption)} "
        f'<span class="links">Alone: <a href="{stem}.png">PNG</a> · <a href="{stem}.svg">SVG</a></span>'
        f"</figcaption></figure>"
    )


CAUTION = (
    "Research software, not for clinical decisions. Picking the pipeline with the most significant channels "
    "on the data you then test inflates false positives; choose on a measure that ignores the contrast "
    "(the collapsed ERP over its SME) or on tuning subjects, and confirm on subjects that played no part in the choice."
)


def run_report_html(document: RunResultDocument, run: RunFacts, shown: Sequence[tuple[ReportFigure, bytes]]) -> str:
    """The run report page: inputs and provenance, then the figures in ``shown`` (with their PNG bytes)."""
    scoring = document.scoring
    first, second = (escape(label) for label in scoring.conditions)
    body = [
        f"<h1>Run report {escape(run.id)}</h1>",
        f'<p class="sub">Study {_code(run.study_code)} — {escape(run.study_title)} · status {escape(run.status)} · '
        f"created {_when(run.created_at)} · finished {_when(run.finished_at)}</p>",
        f'<p class="caution">{escape(CAUTION)}</p>',
        verdict_html(document),
        "<h2>Results</h2>",
        f"<p>Contrast <strong>{first} − {second}</strong>, window {scoring.window_s[0]:g}–"
        f"{scoring.window_s[1]:g} s, α = {scoring.alpha:g}, correction {escape(scoring.correction)}.</p>",
        _exploratory_html(document),
        _figures_html(shown),
        _comparisons_html(document),
        _errors_html(document),
        "<h2>Inputs</h2>",
        _epoch_sets_html(run.epoch_sets),
        "<h3>Pipelines</h3>",
        _pipelines_html(run.pipelines, document.provenance.pipeline_hashes),
        "<h3>Scoring</h3>",
        f"<p>{_code(json.dumps(scoring.model_dump(mode='json'), sort_keys=True))}</p>",
        "<h2>Provenance</h2>",
        _provenance_html(document.provenance),
    ]
    return _page(f"epoch-assay run {run.id}", "".join(body))


def verdict_html(document: RunResultDocument, run_id: str | None = None) -> str:
    """The plain-language verdict paragraph of a result document; ``run_id`` names and links the run."""
    text = escape(verdict_text(verdict_facts(document)))
    if run_id is None:
        return f'<p class="verdict"><strong>Verdict.</strong> {text}</p>'
    link = f'<a href="../../runs/{quote(run_id, safe="")}/report">{escape(run_id)}</a>'
    return f'<p class="verdict"><strong>Verdict of the latest run, {link}.</strong> {text}</p>'


def _exploratory_html(document: RunResultDocument) -> str:
    """The document's ``exploratory`` note, shown above the figures it concerns."""
    note = document.exploratory
    if note is None:
        return ""
    parts = ", ".join(escape(part) for part in note.parts)
    return f'<p class="caution"><strong>Exploratory: {parts}.</strong> {escape(note.reason)}.</p>'


def _p_text(value: float | None) -> str:
    return "–" if value is None else f"{value:.3g}"


def _comparisons_html(document: RunResultDocument) -> str:
    """The ranking against the reference, with p adjusted across the pipelines compared."""
    entries = sorted(document.ranking or (), key=lambda item: item.rank)
    if not entries:
        return ""
    rows, adjustment = [], None
    for entry in entries:
        versus, spread = entry.vs_reference, entry.rank_spread
        adjustment = adjustment or (versus.adjustment if versus is not None else None)
        rows.append(
            [
                str(entry.rank),
                escape(entry.pipeline),
                _p_text(entry.mean),
                "–" if versus is None else _p_text(versus.mean_difference),
                "–" if versus is None else _p_text(versus.paired_t_p),
                "–" if versus is None else _p_text(versus.p_adjusted),
                _p_text(entry.probability_best),
                "–" if spread is None else f"{spread.low:g}–{spread.high:g}",
            ]
        )
    return (
        "<h3>Pipelines against the reference</h3>"
        + _table(
            ["rank", "pipeline", "mean", "Δ reference", "p (paired t)", "p adjusted", "P(best)", "rank spread"],
            rows,
            numeric=(0, 2, 3, 4, 5, 6),
        )
        + f"<p>p adjusted: {escape(adjustment or 'none')}. P(best) and rank spread: share of subject "
        "bootstraps in which the pipeline is best, and 2.5–97.5 percentiles of its rank; descriptive, "
        "not a probability or a confidence interval.</p>"
    )


def _figures_html(shown: Sequence[tuple[ReportFigure, bytes]]) -> str:
    maps = [(item, png) for item, png in shown if item.name.startswith("topomap-")]
    others = [(item, png) for item, png in shown if not item.name.startswith("topomap-")]
    parts = [_figure(item, png) for item, png in others[:1]]
    if maps:
        parts.append(
            '<h3>Where on the scalp</h3><div class="maps">'
            + "".join(_figure(item, png) for item, png in maps)
            + "</div>"
        )
    parts.extend(_figure(item, png) for item, png in others[1:])
    if not shown:
        parts.append("<p>No entry of this run was scored, so there is nothing to plot.</p>")
    return "".join(parts)


def _errors_html(document: RunResultDocument) -> str:
    failed = [(entry, entry.error) for entry in document.results if entry.error]
    warned = [entry for entry in document.results if entry.warnings]
    if not failed and not warned:
        return ""
    rows = [[escape(e.pipeline), escape(e.subject), f'<span class="bad">{escape(error)}</span>'] for e, error in failed]
    rows += [[escape(e.pipeline), escape(e.subject), escape("; ".join(e.warnings))] for e in warned]
    return "<h3>Errors and warnings</h3>" + _table(["pipeline", "subject", "message"], rows)


def _epoch_sets_html(epoch_sets: Sequence[EpochSetFacts]) -> str:
    rows = [
        [
            _code(item.id),
            escape(item.subject),
            escape(item.session or "—"),
            escape(", ".join(f"{label}: {count}" for label, count in item.conditions.items())),
            str(item.n_channels),
            f"{item.sfreq:g}",
            _code(item.sha256[:16] + "…"),
            _when(item.created_at),
        ]
        for item in epoch_sets
    ]
    return _table(
        ["epoch set", "subject", "session", "trials", "channels", "Hz", "SHA-256", "uploaded"], rows, numeric=(4, 5)
    )


def _pipelines_html(pipelines: Sequence[dict[str, Any]], hashes: dict[str, str]) -> str:
    rows = []
    for pipeline in pipelines:
        steps = " → ".join(_step_text(step) for step in pipeline.get("steps", [])) or "no steps"
        rows.append([escape(pipeline["name"]), escape(steps), _code(hashes.get(pipeline["name"], "")[:16] + "…")])
    return _table(["pipeline", "steps", "spec hash"], rows)


def _step_text(step: dict[str, Any]) -> str:
    params = ", ".join(f"{key}={value}" for key, value in step.items() if key != "step" and value is not None)
    return f"{step['step']}({params})"


def _provenance_html(provenance: RunProvenance) -> str:
    software = ", ".join(f"{name} {version}" for name, version in provenance.software.items())
    seeds = ", ".join(f"{name}: {seed}" for name, seed in provenance.seeds.model_dump().items())
    rows = [
        ["software", escape(software)],
        ["seeds", escape(seeds or "—")],
        ["scoring hash", _code(provenance.scoring_hash)],
    ]
    rows += [[f"file {escape(es)}", _code(sha)] for es, sha in provenance.epoch_set_sha256.items()]
    return _table(["what", "value"], rows)


def _locked_html(study_code: str, locked: LockedFacts | None) -> str:
    if locked is None:
        return (
            f"<p>No pipeline is locked; lock one with POST /v1/studies/{escape(study_code)}/locked-pipeline to "
            "score every new epoch set on arrival.</p>"
        )
    steps = " → ".join(_step_text(step) for step in locked.steps) or "no steps"
    source = escape(locked.source_run) if locked.source_run else "given directly"
    return _table(
        ["pipeline", "steps", "spec hash", "locked", "from run"],
        [[escape(locked.name), escape(steps), _code(locked.pipeline_hash[:16] + "…"), _when(locked.locked_at), source]],
    )


def _quality_html(quality: Sequence[ArrivalQuality]) -> str:
    if not quality:
        return "<p>No epoch set has been scored on arrival yet.</p>"
    rows = []
    for item in quality:
        sme = ", ".join(
            f"{label}: {value:.2f}" if value is not None else f"{label}: —"
            for label, value in item.median_sme_uv.items()
        )
        trials = ", ".join(f"{label}: {count}" for label, count in item.n_trials.items())
        kept = "—" if item.channels_kept is None else f"{item.channels_kept} of {item.channels_uploaded}"
        rows.append(
            [
                _code(item.epoch_set),
                escape(item.subject),
                escape(item.session or "—"),
                _when(item.scored_at),
                escape(trials or "—"),
                escape(kept),
                escape(sme or "—"),
                f'<span class="bad">{escape(item.error)}</span>' if item.error else "",
            ]
        )
    return _table(
        ["epoch set", "subject", "session", "scored", "trials kept", "channels kept", "median SME (µV)", "problem"],
        rows,
    )


def study_report_html(
    study_code: str,
    study_title: str,
    runs: Sequence[RunSummaryRow],
    epoch_sets: Sequence[EpochSetFacts],
    arrival_png: bytes | None,
    locked: LockedFacts | None,
    quality: Sequence[ArrivalQuality],
    latest: tuple[str, RunResultDocument] | None = None,
) -> str:
    """The study page: the verdict of the ``latest`` scored run (its id and result document), the runs so
    far, the locked pipeline, data quality on arrival, the epoch sets."""
    run_rows = [
        [
            f'<a href="../../runs/{quote(run.id, safe="")}/report">{escape(run.id)}</a>',
            escape(run.status) + (f' <span class="bad">({escape(run.error)})</span>' if run.error else ""),
            _when(run.created_at),
            escape(", ".join(run.pipelines)),
            str(run.n_epoch_sets),
        ]
        for run in runs
    ]
    arrival = ""
    if arrival_png is not None:
        arrival = (
            f'<figure id="fig-arrivals"><img src="{data_uri(arrival_png)}" alt="Epoch sets on arrival">'
            "<figcaption><strong>Epoch sets on arrival.</strong> Trials of each condition and channels of every "
            "epoch set, in the order they were uploaded; a drop flags a session to look at.</figcaption>"
            "</figure>"
        )
    body = [
        f"<h1>Study {escape(study_code)}</h1>",
        f'<p class="sub">{escape(study_title)}</p>',
        f'<p class="caution">{escape(CAUTION)}</p>',
        verdict_html(latest[1], latest[0]) if latest else "",
        f"<h2>Runs ({len(runs)})</h2>",
        _table(["run", "status", "created", "pipelines", "epoch sets"], run_rows, numeric=(4,))
        if runs
        else "<p>No runs yet.</p>",
        "<h2>Locked pipeline</h2>",
        _locked_html(study_code, locked),
        f"<h2>Quality on arrival ({len(quality)})</h2>",
        _quality_html(quality),
        f"<h2>Epoch sets ({len(epoch_sets)})</h2>",
        arrival,
        _epoch_sets_html(epoch_sets) if epoch_sets else "<p>No epoch sets yet.</p>",
    ]
    return _page(f"epoch-assay study {study_code}", "".join(body))
