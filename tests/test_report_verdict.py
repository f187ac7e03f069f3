"""The plain-language verdict at the top of the run report and the study page."""

from service.report.html import verdict_html
from service.report.summary import verdict_facts, verdict_text

RANKING = [
    {
        "rank": 1,
        "pipeline": "hp0.5-avg",
        "n_subjects": 8,
        "mean": 0.61,
        "metric": "significant_fraction",
        "vs_reference": {
            "reference_pipeline": "avg",
            "n_subjects": 8,
            "mean_difference": 0.42,
            "mean_difference_ci": [0.30, 0.54],
            "paired_t_p": 0.0004,
            "p_adjusted": 0.0011,
        },
    },
    {
        "rank": 2,
        "pipeline": "avg",
        "n_subjects": 8,
        "mean": 0.19,
        "metric": "significant_fraction",
        "vs_reference": None,
    },
]
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


def _document(**parts) -> dict:
    return {
        "scoring": {"reference_pipeline": None},
        "provenance": {"pipeline_hashes": {"avg": "a", "hp0.5-avg": "b"}},
        "results": [],
        **parts,
    }


def test_verdict_names_the_winner_the_adjusted_comparison_and_the_held_out_confirmation() -> None:
    text = verdict_text(verdict_facts(_document(ranking=RANKING, selection=SELECTION)))
    assert text.startswith("hp0.5-avg is chosen by the run's selection rule of 2 pipelines")
    assert "+0.42 over 8 subjects (95 % confidence interval +0.30 to +0.54)" in text
    assert "p = 0.001 adjusted for 1 comparison with the reference" in text
    assert "on the 4 held-out subjects" in text and "0.58 against 0.17 for the reference, so the choice held up" in text


def test_without_an_adjusted_p_the_verdict_says_the_paired_p_is_unadjusted() -> None:
    ranking = [dict(RANKING[0], vs_reference={**RANKING[0]["vs_reference"], "p_adjusted": None}), RANKING[1]]
    text = verdict_text(verdict_facts(_document(ranking=ranking)))
    assert "p < 0.001 from a paired t test not adjusted" in text


def test_without_a_selection_the_verdict_says_nothing_was_held_out() -> None:
    text = verdict_text(verdict_facts(_document(ranking=RANKING)))
    assert text.startswith("hp0.5-avg is ranked first")
    assert "No subjects were held out" in text


def test_when_the_reference_wins_there_is_no_comparison_to_report() -> None:
    ranking = [dict(RANKING[1], rank=1), dict(RANKING[0], rank=2)]
    text = verdict_text(verdict_facts(_document(ranking=ranking)))
    assert "It is the reference pipeline itself" in text


def test_a_document_without_ranking_gets_a_verdict_that_says_so() -> None:
    text = verdict_text(verdict_facts(_document()))
    assert text.startswith("This run has no ranking")


def test_the_verdict_paragraph_escapes_pipeline_names() -> None:
    ranking = [dict(RANKING[0], pipeline="<b>hp</b>"), RANKING[1]]
    html = verdict_html(_document(ranking=ranking), "run_1")
    assert "<b>hp</b>" not in html and "&lt;b&gt;hp&lt;/b&gt;" in html
    assert 'href="../../runs/run_1/report"' in html
