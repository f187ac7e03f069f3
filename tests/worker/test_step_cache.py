"""The on-disk step cache: round trip, hits and misses, LRU eviction within the size bound."""

import os

import numpy as np
import pytest

from epoch_assay.engine.provenance import StepProvenanceBase
from epoch_assay.engine.steps.baseline import Baseline
from epoch_assay.engine.steps.ica import ComponentRemoved, Ica
from epoch_assay.engine.tree import StepOutput
from tests.engine.conftest import random_epoch_set
from tests.support.step_cases import STEP_CASES, applied_case
from worker.execution.step_cache import DiskStepCache


def output(seed: int, record: StepProvenanceBase | None = None, seconds: float = 0.0) -> StepOutput:
    epochs = random_epoch_set(n_trials=4, n_channels=3, n_times=20, seed=seed, bads=frozenset({"E1"}))
    epochs = epochs.with_changes(positions=np.arange(9.0).reshape(3, 3))
    record = record or Baseline(window_s=(-0.1, 0.0)).record()
    record.seconds = seconds
    return StepOutput(epochs=epochs, record=record)


def key(i: int) -> str:
    return f"{i:064x}"


def entry_bytes(tmp_path) -> int:
    probe = DiskStepCache(tmp_path / "probe", max_bytes=10**9)
    probe.put(key(0), output(0))
    return probe.total_bytes()


def test_entry_round_trips_arrays_metadata_and_record(tmp_path):
    cache = DiskStepCache(tmp_path, max_bytes=10**9)
    record = Ica().record(warnings=["w"], components_removed=[ComponentRemoved(index=2, kind="ocular", score=0.9)])
    stored = output(1, record)
    cache.put(key(1), stored)
    loaded = cache.get(key(1))
    assert loaded is not None
    np.testing.assert_array_equal(loaded.epochs.data, stored.epochs.data)
    np.testing.assert_array_equal(loaded.epochs.positions, stored.epochs.positions)
    assert loaded.epochs.labels.tolist() == stored.epochs.labels.tolist()
    assert (loaded.epochs.ch_names, loaded.epochs.ch_types, loaded.epochs.bads) == (
        stored.epochs.ch_names,
        stored.epochs.ch_types,
        stored.epochs.bads,
    )
    assert (loaded.epochs.sfreq, loaded.epochs.tmin) == (stored.epochs.sfreq, stored.epochs.tmin)
    assert loaded.record == stored.record


def test_hits_and_misses_are_counted(tmp_path):
    cache = DiskStepCache(tmp_path, max_bytes=10**9)
    assert cache.get(key(1)) is None
    cache.put(key(1), output(1))
    assert cache.get(key(1)) is not None
    assert cache.get(key(2)) is None
    assert (cache.stats().hits, cache.stats().misses) == (1, 2)


def test_entries_are_shared_between_cache_objects_on_one_folder(tmp_path):
    DiskStepCache(tmp_path, max_bytes=10**9).put(key(1), output(1))
    assert DiskStepCache(tmp_path, max_bytes=10**9).get(key(1)) is not None


def test_total_size_stays_within_the_bound(tmp_path):
    size = entry_bytes(tmp_path)
    cache = DiskStepCache(tmp_path / "c", max_bytes=3 * size)
    for i in range(10):
        cache.put(key(i), output(i))
        assert cache.total_bytes() <= 3 * size
    assert len(list((tmp_path / "c").glob("*.npz"))) == 3


def test_least_recently_used_entry_is_evicted_first(tmp_path):
    size = entry_bytes(tmp_path)
    cache = DiskStepCache(tmp_path / "c", max_bytes=3 * size)
    for i in range(3):
        cache.put(key(i), output(i))
    assert cache.get(key(0)) is not None  # 0 is now the most recently used; 1 the least
    cache.put(key(3), output(3))
    assert cache.get(key(1)) is None
    assert all(cache.get(key(i)) is not None for i in (0, 2, 3))


def test_an_output_larger_than_the_bound_is_not_stored(tmp_path):
    cache = DiskStepCache(tmp_path, max_bytes=100)
    cache.put(key(1), output(1))
    assert cache.get(key(1)) is None and cache.total_bytes() == 0


def test_outputs_of_steps_faster_than_the_threshold_are_not_stored(tmp_path):
    cache = DiskStepCache(tmp_path, max_bytes=10**9, min_step_seconds=0.5)
    cache.put(key(1), output(1, seconds=0.1))
    cache.put(key(2), output(2, seconds=0.7))
    assert cache.get(key(1)) is None and cache.get(key(2)) is not None


def test_a_corrupt_entry_is_a_miss_and_is_removed(tmp_path):
    cache = DiskStepCache(tmp_path, max_bytes=10**9)
    cache.put(key(1), output(1))
    path = tmp_path / f"{key(1)}.npz"
    path.write_bytes(path.read_bytes()[:100])
    assert cache.get(key(1)) is None
    assert not path.exists()


def test_no_temporary_files_are_left_after_a_put(tmp_path):
    DiskStepCache(tmp_path, max_bytes=10**9).put(key(1), output(1))
    assert sorted(os.listdir(tmp_path)) == [f"{key(1)}.npz"]


def test_keys_that_are_not_digests_are_refused(tmp_path):
    with pytest.raises(ValueError):
        DiskStepCache(tmp_path, max_bytes=10**9).get("../escape")


@pytest.mark.parametrize("index", [pytest.param(i, id=case.id) for i, case in enumerate(STEP_CASES)])
def test_every_registered_steps_output_round_trips_through_the_disk(tmp_path, index):
    applied = applied_case(index)
    cache = DiskStepCache(tmp_path, max_bytes=10**9)
    cache.put(key(index), StepOutput(epochs=applied.output, record=applied.record))
    loaded = cache.get(key(index))
    assert loaded is not None
    assert loaded.record == applied.record and type(loaded.record) is type(applied.record)
    np.testing.assert_array_equal(loaded.epochs.data, applied.output.data)
    assert loaded.epochs.meta() == applied.output.meta()


def test_an_entry_whose_record_no_step_has_is_a_miss(tmp_path):
    cache = DiskStepCache(tmp_path, max_bytes=10**9)
    cache.put(key(1), output(1))
    path = tmp_path / f"{key(1)}.npz"
    with np.load(path) as archive:
        arrays = {name: archive[name] for name in archive.files}
    arrays["record"] = np.array('{"step": "no_such_step", "version": 1, "params": {}}')
    with path.open("wb") as stream:
        np.savez(stream, **arrays)
    assert cache.get(key(1)) is None and not path.exists()


def test_an_entry_keeps_the_per_trial_arrays(tmp_path):
    cache = DiskStepCache(tmp_path, max_bytes=10**9)
    stored = output(3)
    ids = np.array([f"t{i}" for i in range(stored.epochs.n_trials)])
    stored = StepOutput(epochs=stored.epochs.with_changes(trial_arrays={"trial_id": ids}), record=stored.record)
    cache.put(key(3), stored)
    assert cache.get(key(3)).epochs.trial_arrays["trial_id"].tolist() == ids.tolist()
