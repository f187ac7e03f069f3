"""Reading the service's answers for people: problem details and a summary table of results."""

import json
from typing import Any

import httpx


def summary_lines(results: list[dict[str, Any]]) -> list[str]:
    """A small table, one row per pipeline in the order they first appear.

    Columns: subjects scored, mean share of significant channels across subjects, and the
    mean over subjects of the resampling summary of that share: the subset mean and the
    2.5–97.5 percentile spread over subsets (modes fixed, equalized; a spread, not a
    confidence interval), or the 95 % percentile interval (mode all).
    """
    by_pipeline: dict[str, list[dict[str, Any]]] = {}
    for row in results:
        by_pipeline.setdefault(row["pipeline"], []).append(row)
    name_width = max([len("pipeline"), *(len(name) for name in by_pipeline)])
    header = f"{'pipeline':<{name_width}}  subjects  mean signif.  subset mean  resampled range (mean bounds)"
    lines = [header, "-" * len(header)]
    for name, rows in by_pipeline.items():
        fraction = _mean([row["significant_fraction"] for row in rows])
        boots = [row["bootstrap"] for row in rows if row.get("bootstrap")]
        if boots and "subset_mean" in boots[0]:
            spread = f"[{_mean([b['spread_low'] for b in boots]):.2f}, {_mean([b['spread_high'] for b in boots]):.2f}]"
            bootstrap_text = f"{_mean([b['subset_mean'] for b in boots]):>11.2f}  spread {spread}"
        elif boots:
            interval = f"[{_mean([b['ci_low'] for b in boots]):.2f}, {_mean([b['ci_high'] for b in boots]):.2f}]"
            bootstrap_text = f"{'-':>11}  95 % CI {interval}"
        else:
            bootstrap_text = f"{'-':>11}  -"
        lines.append(f"{name:<{name_width}}  {len(rows):>8}  {fraction:>12.2f}  {bootstrap_text}")
    return lines


def _mean(values: list[float | None]) -> float:
    """Mean of the values that are not null (an entry that could not be scored has nulls); NaN for none."""
    present = [value for value in values if value is not None]
    return sum(present) / len(present) if present else float("nan")


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
