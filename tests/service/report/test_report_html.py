"""The run report page shows the exploratory note and the comparisons with their adjusted p."""

from datetime import UTC, datetime

from epoch_assay.engine.document import RunResultDocument
from epoch_assay.engine.document.run import RESULT_SCHEMA_VERSION, RunProvenance, Seeds
from epoch_assay.engine.multiverse_report import exploratory_note, ranking_document
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.selection import SplitSpec, TuningHoldoutSpec
from service.report.html import RunFacts, run_report_html

NAMES = ["ref", "lp30", "hp1"]
RESULTS = [
    {"pipeline": name, "subject": f"s{s}", "significant_fraction": 0.1 * i + 0.01 * s + 0.003 * ((7 * s + 3 * i) % 5)}
    for s in range(5)
    for i, name in enumerate(NAMES)
]
DOCUMENT = RunResultDocument(
    schema_version=RESULT_SCHEMA_VERSION,
    run="run_1",
    study="S",
    scoring=ScoringSpec(conditions=("a", "b"), window_s=(0.3, 0.5)),
    provenance=RunProvenance(
        software={},
        scoring_hash="0" * 64,
        pipeline_hashes=dict.fromkeys(NAMES, "0" * 64),
        epoch_set_sha256={},
        seeds=Seeds(bootstrap=None),
    ),
    results=[],
    ranking=ranking_document(RESULTS, NAMES, "ref", "significant_fraction"),
    exploratory=exploratory_note(TuningHoldoutSpec(split=SplitSpec())),
)
RUN = RunFacts("run_1", "S", "Study", "succeeded", datetime(2026, 1, 1, tzinfo=UTC), None, [], [])


def test_run_report_marks_group_and_ranking_exploratory_in_a_run_with_a_selection():
    page = run_report_html(DOCUMENT, RUN, [])
    assert "Exploratory: group, ranking." in page and "selection.holdout" in page


def test_run_report_lists_each_pipeline_with_its_adjusted_p_and_says_how_it_was_adjusted():
    page = run_report_html(DOCUMENT, RUN, [])
    assert page.count("<tr>") >= len(NAMES)
    assert "exact, all 32 sign patterns of 5 subjects" in page


def test_run_report_without_a_selection_has_no_exploratory_note():
    page = run_report_html(DOCUMENT.model_copy(update={"exploratory": None}), RUN, [])
    assert "Exploratory:" not in page
