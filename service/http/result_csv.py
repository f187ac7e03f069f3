"""A result document as CSV: one row per pipeline × epoch set × channel, for spreadsheets and LIMS imports."""

import csv
import io
from typing import Any

from epoch_assay.engine.document import FractionInterval, RunResultDocument, SubsetSpread

COLUMNS = (
    "run",
    "study",
    "pipeline",
    "pipeline_hash",
    "epoch_set",
    "subject",
    "session",
    "channel",
    "statistic_name",
    "statistic",
    "p",
    "p_adjusted",
    "significant",
    "significant_fraction",
    "bootstrap_mode",
    "bootstrap_subset_mean",
    "bootstrap_spread_low",
    "bootstrap_spread_high",
    "bootstrap_ci_low",
    "bootstrap_ci_high",
    "mean_welch_t",
    "mean_welch_t_ci_low",
    "mean_welch_t_ci_high",
    "condition_a",
    "n_trials_a",
    "condition_b",
    "n_trials_b",
    "error",
)
CSV_EXAMPLE = (
    ",".join(COLUMNS) + "\r\n"
    "run_0123456789abcdef,READ-01,raw,9f2c…,es_3f9c0a1b7d2e4f60,sub-01,ses-01,Pz,welch_t,-4.1,0.0001,0.002,true,"
    "0.41,fixed,0.38,0.22,0.53,,,-1.9,-2.4,-1.4,incongruent,70,congruent,70,\r\n"
)
# Text a spreadsheet would run as a formula (OWASP, "CSV injection") is quoted with a leading apostrophe.
_FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
_TEXT_COLUMNS = {"pipeline", "epoch_set", "subject", "session", "channel", "condition_a", "condition_b", "error"}


def _cell(column: str, value: Any) -> Any:
    if value is None:
        return ""
    if column in _TEXT_COLUMNS and isinstance(value, str) and value.startswith(_FORMULA_STARTS):
        return "'" + value
    return value


def _rows(document: RunResultDocument) -> list[dict[str, Any]]:
    condition_a, condition_b = document.scoring.conditions
    rows = []
    for entry in document.results:
        bootstrap, mean_t = entry.bootstrap, entry.mean_welch_t
        n_trials = entry.n_trials or {}
        shared = {
            "run": document.run,
            "study": document.study,
            "pipeline": entry.pipeline,
            "pipeline_hash": entry.pipeline_hash,
            "epoch_set": entry.epoch_set,
            "subject": entry.subject,
            "session": entry.session,
            "significant_fraction": entry.significant_fraction,
            "bootstrap_mode": None if bootstrap is None else bootstrap.mode,
            "bootstrap_subset_mean": bootstrap.subset_mean if isinstance(bootstrap, SubsetSpread) else None,
            "bootstrap_spread_low": bootstrap.spread_low if isinstance(bootstrap, SubsetSpread) else None,
            "bootstrap_spread_high": bootstrap.spread_high if isinstance(bootstrap, SubsetSpread) else None,
            "bootstrap_ci_low": bootstrap.ci_low if isinstance(bootstrap, FractionInterval) else None,
            "bootstrap_ci_high": bootstrap.ci_high if isinstance(bootstrap, FractionInterval) else None,
            "mean_welch_t": None if mean_t is None else mean_t.value,
            "mean_welch_t_ci_low": None if mean_t is None else mean_t.ci_low,
            "mean_welch_t_ci_high": None if mean_t is None else mean_t.ci_high,
            "condition_a": condition_a,
            "n_trials_a": n_trials.get(condition_a),
            "condition_b": condition_b,
            "n_trials_b": n_trials.get(condition_b),
            "error": entry.error,
        }
        if not entry.channels:
            rows.append(shared)  # an entry that could not be scored: one row with its error
        for channel in entry.channels or ():
            rows.append(
                shared
                | {
                    "channel": channel.name,
                    "statistic_name": entry.statistic_name,
                    "statistic": channel.statistic,
                    "p": channel.p,
                    "p_adjusted": channel.p_adjusted,
                    "significant": str(channel.significant).lower(),
                }
            )
    return rows


def result_csv(document: RunResultDocument) -> str:
    """The CSV text of ``document``; an entry that could not be scored is one row carrying its ``error``."""
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=COLUMNS, lineterminator="\r\n")
    writer.writeheader()
    for row in _rows(document):
        writer.writerow({column: _cell(column, row.get(column)) for column in COLUMNS})
    return out.getvalue()


def preferred_media_type(accept: str, offered: tuple[str, ...]) -> str | None:
    """The one of ``offered`` that an ``Accept`` header rates highest (RFC 9110 §12.5.1); None if it refuses all.

    The most specific matching range sets a type's quality; on a tie the earlier of ``offered`` wins.
    """
    if not accept.strip():
        return offered[0]
    ranges: list[tuple[str, float]] = []
    for part in accept.split(","):
        media_range, *params = (piece.strip().lower() for piece in part.split(";"))
        q = 1.0
        for param in params:
            name, _, value = param.partition("=")
            if name.strip() == "q":
                try:
                    q = float(value)
                except ValueError:
                    q = 0.0
        ranges.append((media_range, q))

    def quality(media_type: str) -> float:
        for candidate in (media_type, f"{media_type.split('/')[0]}/*", "*/*"):
            matching = [q for media_range, q in ranges if media_range == candidate]
            if matching:
                return max(matching)
        return 0.0

    q, _, media_type = max((quality(media_type), -index, media_type) for index, media_type in enumerate(offered))
    return media_type if q > 0 else None
