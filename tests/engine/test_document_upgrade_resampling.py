"""Schema version 1 documents read as version 2: the channel statistic and the resampling summary renamed."""

import copy

import pytest

from epoch_assay.engine.document import FractionInterval, SubsetSpread, upgrade_document
from tests.support.result_documents import stored_v1_document


def _scored(document: dict) -> int:
    return next(index for index, entry in enumerate(document["results"]) if "error" not in entry)


def test_channel_t_becomes_statistic_named_after_the_runs_test():
    stored = stored_v1_document()
    index = _scored(stored)
    entry = upgrade_document(copy.deepcopy(stored)).results[index]
    assert [channel.statistic for channel in entry.channels] == pytest.approx(
        [channel["t"] for channel in stored["results"][index]["channels"]]
    )
    assert entry.statistic_name == "welch_t" and entry.mean_welch_t is None


def test_subset_bootstrap_keeps_its_percentiles_as_a_spread_and_has_no_mean():
    stored = stored_v1_document()
    index = _scored(stored)
    old = stored["results"][index]["bootstrap"]
    boot = upgrade_document(copy.deepcopy(stored)).results[index].bootstrap
    assert isinstance(boot, SubsetSpread)
    assert (boot.spread_low, boot.spread_high, boot.subset_mean) == (old["ci_low"], old["ci_high"], None)
    n_trials = stored["results"][index]["n_trials"]
    assert boot.share_of_trials_used == {label: old["trials_per_condition"] / n for label, n in n_trials.items()}


@pytest.mark.parametrize(("ci", "kept"), [("percentile", True), ("bca", False)])
def test_all_mode_keeps_a_percentile_interval_and_drops_a_bca_one(ci, kept):
    stored = stored_v1_document()
    index = _scored(stored)
    stored["scoring"]["bootstrap"] |= {"mode": "all", "ci": ci}
    stored["results"][index]["bootstrap"] |= {"mode": "all", "ci": ci, "ci_low": 0.1, "ci_high": 0.4}
    document = upgrade_document(stored)
    boot = document.results[index].bootstrap
    assert isinstance(boot, FractionInterval)
    assert (boot.ci_low, boot.ci_high) == ((0.1, 0.4) if kept else (None, None))
    assert document.scoring.bootstrap.ci == "percentile"
