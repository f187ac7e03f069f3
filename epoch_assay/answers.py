"""Reading the service's answers for people: problem details and a summary table of results."""

import json
from typing import Any

import httpx


def summary_lines(results: list[dict[str, Any]]) -> list[str]:
    """A small table, one row per pipeline in the order they first appear.

    Columns: subjects scored, mean share of significant channels across subjects, and
    the mean over subjects of the bootstrap median and CI bounds of that share.
    """
    by_pipeline: dict[str, list[dict[str, Any]]] = {}
    for row in results:
        by_pipeline.setdefault(row["pipeline"], []).append(row)
    name_width = max([len("pipeline"), *(len(name) for name in by_pipeline)])
    header = f"{'pipeline':<{name_width}}  subjects  mean signif.  boot. median  boot. CI (mean bounds)"
    lines = [header, "-" * len(header)]
    for name, rows in by_pipeline.items():
        fraction = _mean([row["significant_fraction"] for row in rows])
        boots = [row["bootstrap"] for row in rows if row.get("bootstrap")]
        if boots:
            median = _mean([b["median"] for b in boots])
            ci = f"[{_mean([b['ci_low'] for b in boots]):.2f}, {_mean([b['ci_high'] for b in boots]):.2f}]"
            bootstrap_text = f"{median:>12.2f}  {ci}"
        else:
            bootstrap_text = f"{'-':>12}  -"
        lines.append(f"{name:<{name_width}}  {len(rows):>8}  {fraction:>12.2f}  {bootstrap_text}")
    return lines


def _mean(values: list[float]) -> float:
    return sum(values) / len(values)


def problem_detail(response: httpx.Response) -> str:
    """The human-readable detail of an error answer (RFC 9457 problem+json, or its text)."""
    try:
        problem = response.json()
    except ValueError:
        return response.text or response.reason_phrase
    if not isinstance(problem, dict):
        return json.dumps(problem)
    detail = problem.get("detail", problem.get("title", ""))
    return detail if isinstance(detail, str) else json.dumps(detail)
