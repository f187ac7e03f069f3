"""Report figures built from known numbers show those numbers (read back from the plot's artists)."""

import numpy as np
import pytest
from scipy import stats

from epoch_assay.engine.document import FractionInterval, RunResultDocument, SubsetSpread
from epoch_assay.engine.document.multiverse import SubjectSpread
from epoch_assay.engine.document.run import RunProvenance
from service.report import summary
from service.report.figures import PIPELINES_LABEL, REFERENCE_LABEL, figure_bytes, kept_figure, ranking_figure
from service.report.palette import INK, PIPELINE_COLOURS
from service.report.summary import KeptCounts, RankingRow
from tests.support.result_documents import result_document, scored_entry

ROWS = [
    RankingRow("hp0.1-avg", 0.62, 0.48, 0.74, False),
    RankingRow("raw", 0.41, 0.30, 0.55, True),
    RankingRow("lp30", 0.20, 0.05, 0.33, False),
]


def _read_back(figure) -> dict[str, tuple[float, float, float]]:
    """Per tick label: (point x, left end, right end) of its errorbar, from the line and segment data."""
    ax = figure.axes[0]
    labels = {round(tick.get_position()[1]): tick.get_text() for tick in ax.get_yticklabels()}
    found = {}
    for container in ax.containers:
        point_line, _caps, (segments,) = container.lines
        xs, ys = point_line.get_data()
        for x, y, segment in zip(xs, ys, segments.get_segments(), strict=False):
            found[labels[round(y)]] = (float(x), float(segment[:, 0].min()), float(segment[:, 0].max()))
    return found


def _ranking():
    return ranking_figure(ROWS, description="mean, 95 % CI")


def test_ranking_plot_lists_pipelines_top_down_in_the_given_order():
    ax = _ranking().axes[0]
    by_height = sorted(ax.get_yticklabels(), key=lambda tick: -tick.get_position()[1])
    assert [tick.get_text() for tick in by_height] == ["hp0.1-avg", "raw (reference)", "lp30"]


def test_ranking_plot_points_and_interval_ends_are_the_given_numbers():
    found = _read_back(_ranking())
    assert found == {
        "hp0.1-avg": pytest.approx((0.62, 0.48, 0.74)),
        "raw (reference)": pytest.approx((0.41, 0.30, 0.55)),
        "lp30": pytest.approx((0.20, 0.05, 0.33)),
    }


def test_ranking_plot_draws_the_reference_apart_in_ink():
    containers = {container.get_label(): container for container in _ranking().axes[0].containers}
    reference_x, _ = containers[REFERENCE_LABEL].lines[0].get_data()
    assert list(reference_x) == [0.41]
    assert containers[REFERENCE_LABEL].lines[0].get_color() == INK
    assert containers[PIPELINES_LABEL].lines[0].get_color() == PIPELINE_COLOURS[0]


def _hashes(*names: str) -> RunProvenance:
    provenance = result_document().provenance
    return provenance.model_copy(update={"pipeline_hashes": {name: "h" for name in names}})


def _document(*names: str, **changes) -> RunResultDocument:
    """A document of the pipelines ``names`` with no ranking or group unless given in ``changes``."""
    return result_document(**({"provenance": _hashes(*names), "ranking": None, "group": None} | changes))


def test_ranking_from_entries_orders_by_mean_and_gives_a_t_interval():
    document = _document(
        "raw",
        "avg",
        results=[scored_entry(pipeline="raw", significant_fraction=f) for f in (0.2, 0.3, 0.4)]
        + [scored_entry(pipeline="avg", significant_fraction=f) for f in (0.5, 0.7, 0.6)],
    )
    rows = summary.ranking(document).rows
    assert [row.name for row in rows] == ["avg", "raw"]
    # Reference: scipy.stats.t.interval (Virtanen et al., 2020, SciPy 1.0) for the mean of 0.5, 0.7, 0.6.
    low, high = stats.t.interval(0.95, 2, loc=0.6, scale=stats.sem([0.5, 0.7, 0.6]))
    assert (rows[0].ci_low, rows[0].ci_high) == pytest.approx((low, high))
    assert rows[1].is_reference and not rows[0].is_reference


def test_ranking_of_one_epoch_set_uses_its_fraction_and_all_mode_percentile_interval():
    bootstrap = FractionInterval(
        mode="all", resamples=100, trials_drawn={"a": 30, "b": 30}, ci="percentile", ci_low=0.25, ci_high=0.625
    )
    document = _document("raw", results=[scored_entry(pipeline="raw", significant_fraction=0.5, bootstrap=bootstrap)])
    ranking = summary.ranking(document)
    assert ranking.rows == [RankingRow("raw", 0.5, 0.25, 0.625, True)]
    assert "percentile bootstrap interval" in ranking.description


def test_ranking_of_one_epoch_set_in_fixed_mode_shows_the_subset_mean_and_calls_the_spread_no_interval():
    bootstrap = SubsetSpread(
        mode="fixed",
        resamples=100,
        trials_per_condition=20,
        share_of_trials_used={"a": 0.5, "b": 0.5},
        subset_mean=0.45,
        spread_low=0.3,
        spread_high=0.6,
    )
    document = _document("raw", results=[scored_entry(pipeline="raw", significant_fraction=0.5, bootstrap=bootstrap)])
    ranking = summary.ranking(document)
    assert ranking.rows == [RankingRow("raw", 0.45, 0.3, 0.6, True)]
    assert "not a confidence interval" in ranking.description


def test_ranking_of_the_document_is_used_as_it_stands_with_the_reference_from_vs_reference():
    compared = next(entry for entry in result_document().ranking if entry.vs_reference is not None)
    document = _document(
        "raw",
        "avg",
        results=[],
        ranking=[
            compared.model_copy(
                update={"rank": 2, "pipeline": "raw", "mean": 0.3, "ci_low": 0.2, "ci_high": 0.4, "vs_reference": None}
            ),
            compared.model_copy(update={"rank": 1, "pipeline": "avg", "mean": 0.5, "ci_low": None, "ci_high": None}),
        ],
    )
    assert summary.ranking(document).rows == [
        RankingRow("avg", 0.5, 0.5, 0.5, False),
        RankingRow("raw", 0.3, 0.2, 0.4, True),
    ]


def test_ranking_from_the_group_summary_gives_a_t_interval_from_the_standard_error():
    base = result_document().group[0]
    document = _document(
        "raw",
        "avg",
        scoring=result_document().scoring.model_copy(update={"reference_pipeline": "avg"}),
        results=[],
        group=[
            base.model_copy(
                update={
                    "pipeline": "raw",
                    "n_subjects": 5,
                    "significant_fraction": SubjectSpread(mean=0.4, median=0.4, se=0.05),
                }
            ),
            base.model_copy(
                update={
                    "pipeline": "avg",
                    "n_subjects": 5,
                    "significant_fraction": SubjectSpread(mean=0.3, median=0.3, se=0.1),
                }
            ),
        ],
    )
    rows = summary.ranking(document).rows
    # Reference: scipy.stats.t.interval (Virtanen et al., 2020, SciPy 1.0), 4 degrees of freedom.
    assert rows[0][:4] == pytest.approx(("raw", 0.4, *stats.t.interval(0.95, 4, loc=0.4, scale=0.05)))
    assert [row.is_reference for row in rows] == [False, True]


def test_kept_figure_bars_carry_the_mean_trial_and_channel_counts():
    kept = [KeptCounts("raw", {"a": 30.0, "b": 28.0}, 8.0), KeptCounts("clean", {"a": 25.0, "b": 21.0}, 7.0)]
    trials_ax, channels_ax = kept_figure(kept, ["a", "b"]).axes
    widths = sorted(patch.get_width() for patch in trials_ax.patches)
    assert widths == [21.0, 25.0, 28.0, 30.0]
    assert sorted(patch.get_width() for patch in channels_ax.patches) == [7.0, 8.0]


def test_channel_map_averages_the_statistic_and_marks_channels_significant_in_half_the_sets():
    channel = scored_entry().channels[0]

    def entry(t, s):
        return scored_entry(
            pipeline="raw",
            channels=[
                channel.model_copy(update={"name": "Cz", "statistic": t, "significant": s}),
                channel.model_copy(update={"name": "Pz", "statistic": 1.0, "significant": False}),
            ],
        )

    document = _document("raw", results=[entry(4.0, True), entry(2.0, False)])
    channel_map = summary.channel_map(document, "raw")
    assert channel_map.ch_names == ("Cz", "Pz")
    np.testing.assert_allclose(channel_map.statistic, [3.0, 1.0])
    assert channel_map.statistic_name == "welch_t"
    assert list(channel_map.significant) == [True, False]


def _lightness(hex_colour: str) -> float:
    """CIE 1976 L* of an sRGB colour (D65).

    Reference: sRGB transfer function of IEC 61966-2-1:1999 and the L* formula of CIE 15:2004.
    """
    rgb = np.array([int(hex_colour[i : i + 2], 16) for i in (1, 3, 5)]) / 255.0
    linear = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    y = float(linear @ [0.2126, 0.7152, 0.0722])
    f = y ** (1 / 3) if y > (6 / 29) ** 3 else y / (3 * (6 / 29) ** 2) + 4 / 29
    return 116 * f - 16


def test_palette_colours_differ_in_lightness_so_they_survive_greyscale():
    lightness = sorted(_lightness(colour) for colour in (INK, *PIPELINE_COLOURS))
    # common practice: about 8 L* units apart is a difference readers see at a glance
    assert min(np.diff(lightness)) >= 7.5


def test_svg_output_is_the_same_for_the_same_figure():
    assert figure_bytes(_ranking(), "svg") == figure_bytes(_ranking(), "svg")


@pytest.mark.parametrize("fmt", ["png", "svg"])
def test_labels_that_look_like_maths_are_drawn_as_plain_text(fmt):
    # "$\frac$" is invalid mathtext: matplotlib raises ValueError when it parses it as maths.
    rows = [RankingRow("$\\frac$", 0.5, 0.4, 0.6, False), RankingRow("cost $5 or $6", 0.3, 0.2, 0.4, True)]
    figure = ranking_figure(rows, description="mean, 95 % CI")
    assert figure_bytes(figure, fmt)
    kept = [KeptCounts(pipeline="$x^$", trials={"$\\frac$": 10.0, "b": 9.0}, channels=8.0)]
    assert figure_bytes(kept_figure(kept, ["$\\frac$", "b"]), fmt)
