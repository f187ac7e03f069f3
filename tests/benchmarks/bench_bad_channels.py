"""Recall and false-positive rate of each bad-channel criterion on simulated faults.

Each simulated subject (the demo simulator: 32 EEG channels with volume-conducted pink
background, drift, mains and blinks) gets six faults on channels drawn at random, each
at a severity drawn from a range that runs from obvious to subtle:

===================  ===========================================  ===================
fault                what is done to the channel                  criterion aimed at
===================  ===========================================  ===================
silent               replaced by white noise of 0.02-1 µV         near_silent
large noise          plus white noise of 8-60 µV                  amplitude_outlier
decoupled            replaced by its own random walk and pink     partner_agreement
                     noise of 5-30 µV (shares no scalp signal)
muscle               plus 40-100 Hz band noise of 1-10 µV         fast_power_excess
mains                plus a mains sinusoid of 5-60 µV             mains_excess
bridged pair         two neighbours both set to their mean plus   bridged_pair
                     0.1-2 µV of independent noise
===================  ===========================================  ===================

Recall is the share of a criterion's own faults it flags; the false-positive rate is the
share of untouched channels it flags. The script prints both at a few thresholds per
criterion and marks the one chosen as the default: the threshold of highest recall whose
false-positive rate stays at or below 0.5 % (about one channel in six 32-channel
subjects); on a tie, the one with fewer false positives, then the one that flags fewer
channels overall (the more conservative). The table is copied into docs/steps.md.

    python tests/benchmarks/bench_bad_channels.py          # 60 subjects
    python tests/benchmarks/bench_bad_channels.py --quick  # 4 subjects, smoke run
"""

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np

from epoch_assay.demo import faults
from epoch_assay.demo.simulate import CH_NAMES, EEG_CHANNELS, SimulationConfig, simulate_subject
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.steps.bad_channels import BadChannelCriteria, criterion_statistics

MAX_FALSE_POSITIVE_RATE = 0.005
# Thresholds swept per criterion; each is the criterion's own threshold field.
THRESHOLDS = {
    "near_silent": ("std_below_uv", (0.1, 0.2, 0.5, 1.0, 2.0)),
    "amplitude_outlier": ("robust_z_above", (3.0, 4.0, 5.0, 6.0, 8.0)),
    "partner_agreement": ("mean_r_below", (0.2, 0.3, 0.4, 0.5, 0.6)),
    "mains_excess": ("robust_z_above", (2.0, 2.5, 3.0, 4.0, 5.0)),
    "fast_power_excess": ("robust_z_above", (1.5, 2.0, 2.5, 3.0, 4.0)),
    "bridged_pair": ("distance_below_ratio", (0.005, 0.01, 0.02, 0.05, 0.1)),
}
FAULT_OF = {
    "near_silent": "silent",
    "amplitude_outlier": "large noise",
    "partner_agreement": "decoupled",
    "mains_excess": "mains",
    "fast_power_excess": "muscle",
    "bridged_pair": "bridged pair",
}
# Pairs of neighbouring electrodes a drop of gel can join.
NEIGHBOUR_PAIRS = (("FC1", "FC2"), ("C3", "CP5"), ("P3", "Pz"), ("F3", "Fz"), ("CP2", "C4"), ("O1", "Oz"))
ALL_CRITERIA = BadChannelCriteria.model_validate({name: {} for name in THRESHOLDS})


def _log_uniform(rng: np.random.Generator, low: float, high: float) -> float:
    return float(np.exp(rng.uniform(np.log(low), np.log(high))))


def inject_faults(epochs: EpochSet, rng: np.random.Generator) -> tuple[EpochSet, dict[str, str]]:
    """``epochs`` with six faults on random EEG channels, and the fault of each touched channel."""
    data = epochs.data.copy()
    pair = NEIGHBOUR_PAIRS[rng.integers(len(NEIGHBOUR_PAIRS))]
    others = [name for name in EEG_CHANNELS if name not in pair]
    silent, large, decoupled, muscle, mains = rng.choice(others, size=5, replace=False)
    index = {name: CH_NAMES.index(name) for name in (*pair, silent, large, decoupled, muscle, mains)}
    faults.silence(data, index[silent], _log_uniform(rng, 0.02, 1.0), rng)
    faults.add_white_noise(data, index[large], _log_uniform(rng, 8.0, 60.0), rng)
    faults.decouple(data, index[decoupled], _log_uniform(rng, 5.0, 30.0), rng)
    faults.add_muscle(data, index[muscle], _log_uniform(rng, 1.0, 10.0), epochs.sfreq, rng)
    faults.add_mains(data, index[mains], _log_uniform(rng, 5.0, 60.0), 50.0, epochs.times, rng)
    faults.bridge(data, (index[pair[0]], index[pair[1]]), _log_uniform(rng, 0.1, 2.0), rng)
    injected = {silent: "silent", large: "large noise", decoupled: "decoupled", muscle: "muscle", mains: "mains"}
    injected.update({name: "bridged pair" for name in pair})
    return epochs.with_changes(data=data), injected


def collect(n_subjects: int, config: SimulationConfig) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Statistics per criterion over all subjects' EEG channels, and each channel's fault ('' for none)."""
    rng = np.random.default_rng(7)
    statistics: dict[str, list[np.ndarray]] = {name: [] for name in THRESHOLDS}
    channel_faults: list[str] = []
    for subject in range(1, n_subjects + 1):
        epochs, injected = inject_faults(simulate_subject(config, subject), rng)
        picks, values = criterion_statistics(epochs, ALL_CRITERIA)
        for name in THRESHOLDS:
            statistics[name].append(values[name])
        channel_faults.extend(injected.get(epochs.ch_names[index], "") for index in picks)
    return {name: np.concatenate(parts) for name, parts in statistics.items()}, np.array(channel_faults)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="4 subjects, smoke run")
    args = parser.parse_args()
    n_subjects = 4 if args.quick else 60
    config = SimulationConfig(n_trials_per_condition=10 if args.quick else 30)
    started = time.perf_counter()
    statistics, channel_faults = collect(n_subjects, config)
    clean = channel_faults == ""
    print(
        f"{n_subjects} simulated subjects, {len(EEG_CHANNELS)} EEG channels, {config.n_trials_per_condition * 2} "
        f"trials each; {clean.sum()} clean channels; {time.perf_counter() - started:.1f} s"
    )
    print("| criterion | threshold | recall on its fault | false-positive rate | default |")
    print("|---|---|---|---|---|")
    for name, (field, thresholds) in THRESHOLDS.items():
        default = type(getattr(ALL_CRITERIA, name)).model_fields[field].default
        target = channel_faults == FAULT_OF[name]
        chosen = None
        rows = []
        for threshold in thresholds:
            criterion = getattr(ALL_CRITERIA, name).model_copy(update={field: threshold})
            mask = criterion.flags(statistics[name])
            recall = mask[target].mean()
            false_positive = mask[clean].mean()
            rows.append((threshold, recall, false_positive))
            # Ties in recall go to fewer false positives, then to fewer channels flagged overall.
            key = (recall, -false_positive, -mask.mean())
            if false_positive <= MAX_FALSE_POSITIVE_RATE and (chosen is None or key > chosen[1]):
                chosen = (threshold, key)
        for threshold, recall, false_positive in rows:
            marks = ("chosen " if chosen and threshold == chosen[0] else "") + (
                "(in code)" if threshold == default else ""
            )
            print(
                f"| {name} | {field} = {threshold:g} | {recall:.2f} ({target.sum()}) | {false_positive:.4f} | {marks} |"
            )


if __name__ == "__main__":
    main()
