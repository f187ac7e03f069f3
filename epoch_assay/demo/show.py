"""What `epoch-assay demo` prints: progress bars, the ranking table and the held-out confirmation.

The ranking is read from the result document's ``ranking`` (best first, each pipeline against the
reference, paired by subject) and ``selection`` (a tuning/held-out choice). The p-value shown is
``vs_reference.p_adjusted`` (adjusted for comparing every pipeline with the reference) when the
document has it; otherwise the paired t test's p, labelled as unadjusted.
"""

import sys
from typing import Any, TextIO

BAR_WIDTH = 30


class ProgressBar:
    """A one-line progress bar. On a terminal it redraws in place; elsewhere (a log, a test's
    captured output) it prints one line when done, so output stays short."""

    def __init__(self, label: str, total: float, stream: TextIO | None = None) -> None:
        self.label, self.total = label, total
        self.stream = stream if stream is not None else sys.stdout
        self.live = self.stream.isatty()
        self._last = ""

    def update(self, done: float, note: str = "") -> None:
        share = 0.0 if self.total <= 0 else min(max(done / self.total, 0.0), 1.0)
        filled = round(share * BAR_WIDTH)
        line = f"{self.label:<10} [{'#' * filled}{'.' * (BAR_WIDTH - filled)}] {share:4.0%} {note}".rstrip()
        if self.live and line != self._last:
            self.stream.write("\r" + line.ljust(len(self._last)))
            self.stream.flush()
        self._last = line

    def finish(self, note: str = "") -> None:
        self.update(self.total, note)
        if self.live:
            self.stream.write("\n")
        else:
            self.stream.write(self._last + "\n")
        self.stream.flush()


def ranking_lines(result: dict[str, Any]) -> list[str]:
    """The ranking as a small text table, best first; one line per pipeline."""
    entries = sorted(result.get("ranking") or [], key=lambda entry: entry["rank"])
    if not entries:
        return ["(this run has no ranking)"]
    adjusted = any((entry.get("vs_reference") or {}).get("p_adjusted") is not None for entry in entries)
    p_label = "p adjusted" if adjusted else "p (unadj.)"
    width = max(len("pipeline"), *(len(entry["pipeline"]) for entry in entries))
    header = f"{'#':>2}  {'pipeline':<{width}}  {'mean':>5}  {'95% CI':>13}  {'vs ref.':>7}  {p_label:>10}"
    lines = [header, "-" * len(header)]
    for entry in entries:
        versus = entry.get("vs_reference")
        ci = _interval(entry.get("ci_low"), entry.get("ci_high"))
        if versus is None:
            difference, p_text = "(ref.)", ""
        else:
            difference = _number(versus.get("mean_difference"), "+.2f")
            p_value = versus.get("p_adjusted") if adjusted else versus.get("paired_t_p")
            p_text = _p(p_value)
        lines.append(
            f"{entry['rank']:>2}  {entry['pipeline']:<{width}}  {_number(entry.get('mean'), '.2f'):>5}  {ci:>13}  "
            f"{difference:>7}  {p_text:>10}"
        )
    metric = entries[0].get("metric", "significant_fraction")
    lines.append(
        f"mean = {metric} over {entries[0].get('n_subjects')} subjects; vs ref. = paired difference from the reference"
        + ("; p adjusted for every comparison with the reference" if adjusted else "; p not adjusted")
    )
    return lines


def holdout_lines(result: dict[str, Any]) -> list[str]:
    """The tuning/held-out confirmation in two lines; one line saying why when there is none."""
    selection = result.get("selection") or {}
    if selection.get("rule") != "tuning_holdout" or "winner" not in selection:
        reason = selection.get("error") if selection else "the run had no tuning/held-out selection"
        return [f"held-out check: none ({reason})"]
    winner, reference = selection["winner_holdout_score"], selection["reference_holdout_score"]
    confirmed = winner is not None and reference is not None and winner > reference
    return [
        f"chosen on tuning subjects {', '.join(selection['tuning_subjects'])}: {selection['winner']} "
        f"({_number(selection['winner_tuning_score'], '.2f')})",
        f"held out {', '.join(selection['holdout_subjects'])}: {selection['winner']} {_number(winner, '.2f')} vs "
        f"reference {_number(reference, '.2f')} -> {'confirmed' if confirmed else 'NOT confirmed'}",
    ]


def _number(value: float | None, spec: str) -> str:
    return "-" if value is None else format(value, spec)


def _interval(low: float | None, high: float | None) -> str:
    return "-" if low is None or high is None else f"[{low:.2f}, {high:.2f}]"


def _p(value: float | None) -> str:
    if value is None:
        return "-"
    return "<0.001" if value < 0.001 else f"{value:.3f}"
