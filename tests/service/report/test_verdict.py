"""The plain-language verdict at the top of the run report and the study page."""

from dataclasses import replace

from epoch_assay.engine.document import RunResultDocument
from epoch_assay.engine.document.run import RESULT_SCHEMA_VERSION
from service.report.html import verdict_html
from service.report.summary import verdict_facts, verdict_text

VERSUS = {
    "reference_pipeline": "avg",
    "n_subjects": 8,
    "mean_difference": 0.42,
    "mean_difference_ci": [0.30, 0.54],
    "wilcoxon_p": 0.008,
    "paired_t_p": 0.0004,
}
WINNER = {
    "rank": 1,
    "pipeline": "hp0.5-avg",
    "n_subjects": 8,
    "mean": 0.61,
    "ci_low": 0.5,
    "ci_high": 0.7,
    "metric": "significant_fraction",
    "vs_reference": VERSUS,
    "group": None,
}
REFERENCE = dict(WINNER, rank=2, pipeline="avg", mean=0.19, ci_low=0.1, ci_high=0.3, vs_reference=None)
SELECTION = {
    "rule": "tuning_holdout",
    "metric": "significant_fraction",
    "winner": "hp0.5-avg",
    "tuning_subjects": ["sub-01", "sub-03", "sub-04", "sub-07"],
    "holdout_subjects": ["sub-02", "sub-05", "sub-06", "sub-08"],
    "winner_tuning_score": 0.63,
    "winner_holdout_score": 0.58,
    "reference_holdout_score": 0.17,
}


def _document(ranking: list[dict] | None = None, selection: dict | None = None) -> RunResultDocument:
    return RunResultDocument.model_validate(
        {
            "schema_version": RESULT_SCHEMA_VERSION,
            "run": "run_1",
            "study": "S",
            "scoring": {"conditions": ["a", "b"], "window_s": [0.3, 0.5]},
            "provenance": {
                "software": {},
                "scoring_hash": "0",
                "pipeline_hashes": {"avg": "0", "hp0.5-avg": "1"},
                "epoch_set_sha256": {},
                "seeds": {"bootstrap": None},
            },
            "results": [],
            "group": None,
            "ranking": ranking,
            "selection": selection,
        }
    )


def test_verdict_names_the_winner_the_comparison_and_the_held_out_confirmation() -> None:
    text = verdict_text(verdict_facts(_document([WINNER, REFERENCE], SELECTION)))
    assert text.startswith("hp0.5-avg is chosen by the run's selection rule of 2 pipelines")
    assert "+0.42 over 8 subjects (95 % confidence interval +0.30 to +0.54)" in text
    assert "on the 4 held-out subjects" in text and "0.58 against 0.17 for the reference, so the choice held up" in text


def test_without_an_adjusted_p_the_verdict_says_the_paired_p_is_unadjusted() -> None:
    text = verdict_text(verdict_facts(_document([WINNER, REFERENCE])))
    assert "p < 0.001 from a paired t test not adjusted for the 1 comparison made" in text


def test_with_an_adjusted_p_the_verdict_gives_it_and_what_it_means() -> None:
    facts = replace(verdict_facts(_document([WINNER, REFERENCE])), p_adjusted=0.0011)
    assert "p = 0.001 adjusted for 1 comparison with the reference: a difference unlikely to be chance" in (
        verdict_text(facts)
    )


def test_without_a_selection_the_verdict_says_nothing_was_held_out() -> None:
    text = verdict_text(verdict_facts(_document([WINNER, REFERENCE])))
    assert text.startswith("hp0.5-avg is ranked first")
    assert "No subjects were held out" in text


def test_when_the_reference_wins_there_is_no_comparison_to_report() -> None:
    ranking = [dict(REFERENCE, rank=1), dict(WINNER, rank=2)]
    assert "It is the reference pipeline itself" in verdict_text(verdict_facts(_document(ranking)))


def test_a_document_without_ranking_gets_a_verdict_that_says_so() -> None:
    assert verdict_text(verdict_facts(_document())).startswith("This run has no ranking")


def test_the_verdict_paragraph_escapes_pipeline_names_and_links_the_run() -> None:
    ranking = [dict(WINNER, pipeline="<b>hp</b>"), REFERENCE]
    html = verdict_html(_document(ranking), "run_1")
    assert "<b>hp</b>" not in html and "&lt;b&gt;hp&lt;/b&gt;" in html
    assert 'href="../../runs/run_1/report"' in html
