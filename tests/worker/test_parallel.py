"""Running units in processes: results in order, progress and ETA, stopping on request."""

import functools
import operator
import tempfile

import pytest
from threadpoolctl import threadpool_info

from worker.execution.parallel import Progress, SharedInputUnit, run_units


def squares(n: int) -> list:
    return [functools.partial(operator.mul, i, i) for i in range(n)]


@pytest.mark.parametrize("workers", [1, 2])
def test_results_come_back_in_unit_order(workers):
    assert run_units(squares(7), 7, lambda _: None, workers=workers) == [i * i for i in range(7)]


def test_progress_counts_every_unit_and_ends_with_no_time_left():
    seen: list[Progress] = []
    run_units(squares(5), 5, seen.append, workers=2)
    assert [p.done for p in seen] == [1, 2, 3, 4, 5]
    assert seen[-1].fraction == 1.0 and seen[-1].eta_s == 0.0
    assert all(p.total == 5 and p.eta_s >= 0 for p in seen)


class Stop(Exception):
    pass


def stop_after_two(progress: Progress) -> None:
    if progress.done == 2:
        raise Stop


@pytest.mark.parametrize("workers", [1, 2])
def test_an_exception_from_progress_stops_the_run(workers):
    started = []

    def units():
        for unit in squares(50):
            started.append(unit)
            yield unit

    with pytest.raises(Stop):
        run_units(units(), 50, stop_after_two, workers=workers)
    assert len(started) < 50


def test_units_are_taken_lazily_a_few_per_worker():
    taken = []

    def units():
        for unit in squares(20):
            taken.append(unit)
            yield unit

    def check(progress: Progress) -> None:
        assert len(taken) <= progress.done + 2 * 2

    run_units(units(), 20, check, workers=2)


def input_units(sources: int, per_source: int) -> list[SharedInputUnit]:
    units = []
    for value in range(sources):
        shared = [value] * 1000  # stands for an epoch set: one object, several units
        units += [SharedInputUnit(operator.getitem, shared, (factor,), weight=2) for factor in range(per_source)]
    return units


def test_shared_inputs_reach_their_units_through_files_removed_after_the_run(tmp_path, monkeypatch):
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    seen: list[Progress] = []
    assert run_units(input_units(3, 4), 12, seen.append, workers=2) == [v for v in range(3) for _ in range(4)]
    assert seen[-1].done == 24  # each unit counts its weight
    assert list(tmp_path.iterdir()) == []


def blas_threads(_: int) -> list[int]:
    return [pool["num_threads"] for pool in threadpool_info()]


def test_pool_processes_run_blas_on_one_thread():
    # Reference: threadpoolctl's report of the BLAS and OpenMP libraries loaded in each pool process.
    counts = run_units([functools.partial(blas_threads, i) for i in range(2)], 2, lambda _: None, workers=2)
    assert all(threads and set(threads) == {1} for threads in counts)
