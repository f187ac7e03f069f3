"""Every registered step with each of its examples, applied once to one simulated epoch set.

The epoch set is the demo simulation (our own seeded scenario) with faults the detection
steps can find: a flat channel, a noisy one, a channel already marked bad, and a misc
channel that no step should touch. Outputs are kept per process, so the engine's contract
test and the worker's cache test share one run of each case.
"""

import copy
import functools
from dataclasses import dataclass

import numpy as np

from epoch_assay.demo.simulate import CH_NAMES, SimulationConfig, simulate_subject
from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.provenance import StepProvenanceBase
from epoch_assay.engine.steps import STEP_CLASSES
from epoch_assay.engine.steps.base import Step, step_name
from epoch_assay.engine.units import uv_to_v

CONFIG = SimulationConfig(n_trials_per_condition=15, sfreq=250.0, seed=11)
FLAT, NOISY, MARKED_BAD = "O2", "T8", "P8"


@dataclass(frozen=True)
class StepCase:
    """One example of one registered step."""

    cls: type[Step]
    params: dict

    @property
    def id(self) -> str:
        return f"{step_name(self.cls)}-{self.cls.examples.index(self.params)}"

    def step(self) -> Step:
        return self.cls.model_validate({"step": step_name(self.cls), **self.params})


STEP_CASES = [StepCase(cls, params) for cls in STEP_CLASSES for params in cls.examples]


@functools.cache
def contract_epochs() -> EpochSet:
    """The simulated subject with the faults described above; never modified by the tests."""
    epochs = simulate_subject(CONFIG, 1)
    rng = np.random.default_rng(3)
    data = epochs.data.copy()
    shape = data[:, 0].shape
    data[:, CH_NAMES.index(FLAT)] = uv_to_v(0.05) * rng.standard_normal(shape)
    data[:, CH_NAMES.index(NOISY)] += uv_to_v(60.0) * rng.standard_normal(shape)
    misc = uv_to_v(5.0) * rng.standard_normal((epochs.n_trials, 1, epochs.n_times))
    assert epochs.positions is not None
    return epochs.with_changes(
        data=np.concatenate([data, misc], axis=1),
        ch_names=(*epochs.ch_names, "RESP"),
        ch_types=(*epochs.ch_types, "misc"),
        positions=np.vstack([epochs.positions, np.full((1, 3), np.nan)]),
        bads=frozenset({MARKED_BAD}),
    )


@dataclass(frozen=True)
class Applied:
    """What ``check`` predicted, the input before and after ``apply``, and what ``apply`` returned."""

    predicted: EpochSetMeta
    before: EpochSet
    after: EpochSet
    output: EpochSet
    record: StepProvenanceBase


def run_step(step: Step, epochs: EpochSet) -> Applied:
    """Check then apply ``step`` to ``epochs``, keeping a deep copy of the input from before."""
    predicted = step.check(epochs.meta())
    before = copy.deepcopy(epochs)
    output, record = step.apply(epochs)
    return Applied(predicted=predicted, before=before, after=epochs, output=output, record=record)


@functools.cache
def applied_case(index: int) -> Applied:
    """``STEP_CASES[index]`` run on :func:`contract_epochs`, once per process."""
    return run_step(STEP_CASES[index].step(), contract_epochs())
