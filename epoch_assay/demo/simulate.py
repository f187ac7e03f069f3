"""Simulated READ-01 epoch sets: a centro-parietal negativity seen through a spherical head.

The scalp signal of each trial is the sum of separate additive components, so that a
later step can be judged on how much of a known part it removes:

- brain response: one current dipole under centro-parietal cortex with a Gaussian
  time course peaking near 400 ms, a little in both conditions and more in
  incongruent trials;
- background: many dipoles spread over the cortex with 1/f ("pink") time courses,
  so the background is correlated across channels the way volume conduction makes it;
- sensor noise: white and independent per channel;
- drift: slow sinusoids per channel, continuous across the trials of a session;
- line noise: a mains sinusoid per channel, continuous across trials;
- blinks: a dipole behind the eyes, strongest in VEOG and at Fp1/Fp2.

Dipoles reach the electrodes through MNE's forward model of a three-layer sphere
fitted to the montage. Potentials are reference-free (against infinity); choosing a
reference is left to the pipelines being scored. Each component draws from its own
random stream keyed by (seed, subject, component), so switching one component off
leaves the others unchanged.
"""

from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import mne
import numpy as np
from scipy.fft import irfft, next_fast_len, rfft, rfftfreq

from epoch_assay.demo.scenario import CONDITIONS, INCONGRUENT, SESSION, STUDY_CODE, subject_id
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.io.npz import write_npz
from epoch_assay.engine.montage import standard_montage
from epoch_assay.engine.units import uv_to_v

EEG_CHANNELS = (
    "Fp1",
    "Fp2",
    "F7",
    "F3",
    "Fz",
    "F4",
    "F8",
    "FC5",
    "FC1",
    "FC2",
    "FC6",
    "T7",
    "C3",
    "Cz",
    "C4",
    "T8",
    "TP9",
    "CP5",
    "CP1",
    "CP2",
    "CP6",
    "TP10",
    "P7",
    "P3",
    "Pz",
    "P4",
    "P8",
    "PO9",
    "O1",
    "Oz",
    "O2",
    "PO10",
)
EOG_CHANNEL = "VEOG"
CH_NAMES = (*EEG_CHANNELS, EOG_CHANNEL)
CH_TYPES = ("eeg",) * len(EEG_CHANNELS) + ("eog",)

# Depths as fractions of the inner-skull radius (about 8.7 cm): the sources sit 1.3-2.6 cm
# under the inner skull, where the cortex is.  # value recalled from memory
EFFECT_DEPTH = 0.75
BACKGROUND_DEPTH = 0.7
BLINK_DEPTH = 0.85
N_BACKGROUND_SOURCES = 60
# The eyes sit about 3 cm below the frontopolar electrodes.  # value recalled from memory
EYE_DROP_M = 0.03
# VEOG is a bipolar pair across one eye: brain activity is nearly common to both
# electrodes and cancels, the eyelid artefact does not.
VEOG_BRAIN_FRACTION = 0.2
VEOG_BLINK_RATIO = 2.0

# A session's trials follow each other every 4-6 s (one sentence per trial).
TRIAL_SPACING_S = (4.0, 6.0)
DRIFT_COMPONENTS = 3
DRIFT_FREQ_HZ = (0.005, 0.1)
DRIFT_CHANNEL_SPREAD = 0.5
LINE_CHANNEL_RANGE = (0.5, 1.5)
BLINK_DURATION_S = (0.2, 0.4)
BACKGROUND_SOURCE_SPREAD = 0.5


@dataclass(frozen=True)
class SimulationConfig:
    """What to simulate. Amplitudes in µV (converted to V inside), times in s.

    ``tmax`` ends the epoch and is exclusive: an epoch has
    ``round((tmax - tmin) * sfreq)`` samples. ``effect_uv`` is the peak of the mean
    incongruent − congruent difference at Pz (drawn as a negativity); 0 means no
    effect. ``shared_response_uv`` is the peak negativity at Pz that both conditions
    share. ``noise_uv`` is the RMS of the background over EEG channels. The ``*_sd``
    fields are relative (e.g. 0.3 = 30 %), except ``trial_latency_sd_s``.
    ``subject_spread`` is the log-normal spread of per-subject noise and drift levels.
    ``blink_rate`` is the probability that a trial contains a blink.
    """

    n_trials_per_condition: int = 70
    sfreq: float = 250.0
    tmin: float = -0.2
    tmax: float = 0.8
    effect_uv: float = 4.0
    shared_response_uv: float = 1.5
    effect_peak_s: float = 0.4
    effect_width_s: float = 0.06
    trial_amplitude_sd: float = 0.3
    trial_latency_sd_s: float = 0.02
    subject_effect_sd: float = 0.15
    noise_uv: float = 12.0
    sensor_noise_uv: float = 1.0
    drift_uv: float = 10.0
    line_noise_uv: float = 5.0
    line_freq_hz: float = 50.0
    blink_rate: float = 0.2
    blink_uv: tuple[float, float] = (50.0, 150.0)
    subject_spread: float = 0.25
    seed: int = 2024

    def __post_init__(self) -> None:
        if self.n_trials_per_condition < 1:
            raise ValueError("n_trials_per_condition must be at least 1")
        if self.n_times < 2:
            raise ValueError("tmax - tmin must span at least two samples at sfreq")
        if not 0.0 <= self.blink_rate <= 1.0:
            raise ValueError("blink_rate is a probability and must lie in [0, 1]")
        if not 0.0 < self.line_freq_hz < self.sfreq / 2.0:
            raise ValueError("line_freq_hz must lie between 0 and the Nyquist frequency sfreq / 2")

    @property
    def n_times(self) -> int:
        return round((self.tmax - self.tmin) * self.sfreq)

    @property
    def times(self) -> np.ndarray:
        """Sample times, shape (n_times,), in s."""
        return self.tmin + np.arange(self.n_times) / self.sfreq


@dataclass(frozen=True)
class SourceDipole:
    """A current dipole: position (3,) in m (head coordinates), orientation (3,) unit
    vector, and moment at the peak of its time course in A·m."""

    position: np.ndarray
    orientation: np.ndarray
    moment: float


@dataclass(frozen=True)
class HeadModel:
    """Geometry and leadfields of the simulated head, shared by all subjects.

    Gains have one row per channel of ``CH_NAMES`` (EEG rows from MNE's sphere model,
    the VEOG row derived from Fp1).

    sphere : the fitted three-layer sphere (MNE ConductorModel)
    electrode_positions : array, shape (n_eeg, 3), in m
    effect_position, effect_orientation : array, shape (3,), in m / unit
    effect_gain : array, shape (n_channels,), in V per A·m, for the effect dipole
    blink_position, blink_orientation : array, shape (3,), in m / unit
    blink_pattern : array, shape (n_channels,), blink potential relative to its mean at Fp1/Fp2
    background_positions : array, shape (n_background, 3), in m
    background_gain : array, shape (n_channels, n_background, 3), in V per A·m (free orientation)
    """

    sphere: mne.bem.ConductorModel
    electrode_positions: np.ndarray
    effect_position: np.ndarray
    effect_orientation: np.ndarray
    effect_gain: np.ndarray
    blink_position: np.ndarray
    blink_orientation: np.ndarray
    blink_pattern: np.ndarray
    background_positions: np.ndarray
    background_gain: np.ndarray


@dataclass(frozen=True)
class SimulatedComponents:
    """The additive parts of one subject's epochs, each shape (n_trials, n_channels, n_times), in V.

    labels : array of str, shape (n_trials,)
    onsets : array, shape (n_trials,), time of each trial's event in the session, in s
    """

    brain: np.ndarray
    background: np.ndarray
    sensor_noise: np.ndarray
    drift: np.ndarray
    line_noise: np.ndarray
    blinks: np.ndarray
    labels: np.ndarray
    onsets: np.ndarray

    def total(self) -> np.ndarray:
        """The recorded signal, shape (n_trials, n_channels, n_times), in V."""
        return self.brain + self.background + self.sensor_noise + self.drift + self.line_noise + self.blinks


def eeg_info(sfreq: float = 250.0) -> mne.Info:
    """MNE measurement info of the 32 EEG channels with their 10-20 positions."""
    info = mne.create_info(list(EEG_CHANNELS), sfreq, "eeg")
    info.set_montage(standard_montage("standard_1020"), verbose=False)
    return info


def channel_positions() -> np.ndarray:
    """Positions of ``CH_NAMES``, shape (n_channels, 3), in m (head coordinates), NaN for VEOG."""
    positions = np.full((len(CH_NAMES), 3), np.nan)
    positions[: len(EEG_CHANNELS)] = head_model().electrode_positions
    return positions


@lru_cache(maxsize=1)
def head_model() -> HeadModel:
    """The head model, computed once per process (the forward solution is the slow part)."""
    info = eeg_info()
    sphere = mne.make_sphere_model("auto", "auto", info, verbose=False)
    center = np.asarray(sphere["r0"], dtype=float)
    inner_radius = float(sphere["layers"][0]["rad"])
    electrodes = np.array([ch["loc"][:3] for ch in info["chs"]])

    def electrode(name: str) -> np.ndarray:
        return electrodes[EEG_CHANNELS.index(name)]

    effect_direction = _unit(np.mean([electrode(n) for n in ("Cz", "CP1", "CP2", "Pz")], axis=0) - center)
    effect_position = center + EFFECT_DEPTH * inner_radius * effect_direction
    frontopolar = np.mean([electrode("Fp1"), electrode("Fp2")], axis=0)
    eye_direction = _unit(frontopolar - np.array([0.0, 0.0, EYE_DROP_M]) - center)
    blink_position = center + BLINK_DEPTH * inner_radius * eye_direction
    background_positions = center + BACKGROUND_DEPTH * inner_radius * _cap_directions(N_BACKGROUND_SOURCES)

    gain = _leadfield(info, sphere, np.vstack([effect_position, blink_position, background_positions]))
    # Pointing inwards makes the effect a negativity over the scalp above it; the blink
    # dipole points at the frontopolar sites, where blinks are positive.
    effect_orientation = -effect_direction
    blink_orientation = _unit(frontopolar - blink_position)
    effect_gain = np.append(gain[:, 0] @ effect_orientation, VEOG_BRAIN_FRACTION * (gain[0, 0] @ effect_orientation))
    blink_gain = gain[:, 1] @ blink_orientation
    blink_pattern = np.append(blink_gain / blink_gain[:2].mean(), VEOG_BLINK_RATIO)
    background_gain = np.concatenate([gain[:, 2:], VEOG_BRAIN_FRACTION * gain[:1, 2:]], axis=0)
    return HeadModel(
        sphere=sphere,
        electrode_positions=_read_only(electrodes),
        effect_position=_read_only(effect_position),
        effect_orientation=_read_only(effect_orientation),
        effect_gain=_read_only(effect_gain),
        blink_position=_read_only(blink_position),
        blink_orientation=_read_only(blink_orientation),
        blink_pattern=_read_only(blink_pattern),
        background_positions=_read_only(background_positions),
        background_gain=_read_only(background_gain),
    )


def design_effect_dipole(config: SimulationConfig) -> SourceDipole:
    """The effect dipole of a typical subject (subject factor 1): its moment makes the
    mean incongruent − congruent difference at Pz peak at ``-config.effect_uv``."""
    model = head_model()
    pz_gain = model.effect_gain[CH_NAMES.index("Pz")]
    return SourceDipole(
        position=model.effect_position,
        orientation=model.effect_orientation,
        moment=float(uv_to_v(config.effect_uv) / -pz_gain),
    )


def simulate_components(config: SimulationConfig, subject_index: int) -> SimulatedComponents:
    """All additive components of one subject, deterministic for (config.seed, subject_index)."""
    streams = {name: _stream(config.seed, subject_index, code) for code, name in enumerate(_STREAM_NAMES)}
    labels, onsets = _trial_order(config, streams["trials"])
    times = config.times
    session_times = onsets[:, None] + times[None, :]
    shape = (len(labels), len(CH_NAMES), len(times))
    return SimulatedComponents(
        brain=_brain_response(config, labels, times, streams["brain"]),
        background=_background(config, len(labels), streams["background"]),
        sensor_noise=uv_to_v(config.sensor_noise_uv) * streams["sensor"].standard_normal(shape),
        drift=_drift(config, session_times, streams["drift"]),
        line_noise=_line_noise(config, session_times, streams["line"]),
        blinks=_blinks(config, times, len(labels), streams["blinks"]),
        labels=labels,
        onsets=onsets,
    )


def simulate_subject(config: SimulationConfig, subject_index: int) -> EpochSet:
    """One subject's epoch set (data in V), deterministic for (config.seed, subject_index)."""
    components = simulate_components(config, subject_index)
    return EpochSet(
        data=components.total(),
        sfreq=config.sfreq,
        tmin=config.tmin,
        ch_names=CH_NAMES,
        ch_types=CH_TYPES,
        labels=components.labels,
        positions=channel_positions(),
    )


def simulate_study(config: SimulationConfig, n_subjects: int) -> list[tuple[str, EpochSet]]:
    """Subjects 1..n_subjects as (subject id, epoch set) pairs, ids like ``sub-01``."""
    return [(subject_id(index), simulate_subject(config, index)) for index in range(1, n_subjects + 1)]


def write_study_npz(folder: Path, config: SimulationConfig, n_subjects: int) -> list[Path]:
    """Write each simulated subject to ``folder`` as an NPZ epoch-set file; returns the paths."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for subject, epochs in simulate_study(config, n_subjects):
        path = folder / f"{STUDY_CODE}_{subject}_{SESSION}.npz"
        write_npz(epochs, path)
        paths.append(path)
    return paths


_STREAM_NAMES = ("trials", "brain", "background", "sensor", "drift", "line", "blinks")


def _stream(seed: int, subject_index: int, component: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(subject_index, component)))


def _unit(vectors: np.ndarray) -> np.ndarray:
    return vectors / np.linalg.norm(vectors, axis=-1, keepdims=True)


def _read_only(array: np.ndarray) -> np.ndarray:
    array = np.array(array, dtype=float)
    array.setflags(write=False)
    return array


def _cap_directions(n: int) -> np.ndarray:
    """Unit vectors, shape (n, 3), spread evenly over the sphere above 20 % below the equator.

    A Fibonacci spiral with heights uniform in z covers equal areas per point.
    """
    index = np.arange(n) + 0.5
    z = 1.0 - 1.2 * index / n
    azimuth = index * np.pi * (3.0 - np.sqrt(5.0))
    ring = np.sqrt(1.0 - z**2)
    return np.column_stack([ring * np.cos(azimuth), ring * np.sin(azimuth), z])


def _leadfield(info: mne.Info, sphere: mne.bem.ConductorModel, positions: np.ndarray) -> np.ndarray:
    """Free-orientation EEG leadfield, shape (n_eeg, n_sources, 3), in V per A·m."""
    source_space = mne.setup_volume_source_space(
        pos={"rr": positions, "nn": np.tile([0.0, 0.0, 1.0], (len(positions), 1))}, sphere=sphere, verbose=False
    )
    forward = mne.make_forward_solution(
        info, trans=None, src=source_space, bem=sphere, meg=False, eeg=True, verbose=False
    )
    if forward["nsource"] != len(positions):
        raise RuntimeError("a simulated source lies outside the inner skull sphere; reduce its depth fraction")
    return forward["sol"]["data"].reshape(len(info["ch_names"]), len(positions), 3)


def _trial_order(config: SimulationConfig, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Shuffled condition labels and their onsets in the session (s), each shape (n_trials,)."""
    labels = rng.permutation(np.repeat(np.array(CONDITIONS), config.n_trials_per_condition))
    onsets = np.cumsum(rng.uniform(*TRIAL_SPACING_S, size=len(labels)))
    return labels, onsets


def _subject_scale(config: SimulationConfig, rng: np.random.Generator) -> float:
    return float(np.exp(config.subject_spread * rng.standard_normal()))


def _brain_response(
    config: SimulationConfig, labels: np.ndarray, times: np.ndarray, rng: np.random.Generator
) -> np.ndarray:
    """The effect dipole's contribution, shape (n_trials, n_channels, n_times), in V."""
    n_trials = len(labels)
    subject_effect = config.effect_uv * np.exp(config.subject_effect_sd * rng.standard_normal())
    peak_uv = config.shared_response_uv + subject_effect * (labels == INCONGRUENT)
    peak_uv = peak_uv * (1.0 + config.trial_amplitude_sd * rng.standard_normal(n_trials))
    latency = config.effect_peak_s + config.trial_latency_sd_s * rng.standard_normal(n_trials)
    waveform = np.exp(-0.5 * ((times[None, :] - latency[:, None]) / config.effect_width_s) ** 2)
    gain = head_model().effect_gain
    pattern = gain / -gain[CH_NAMES.index("Pz")]
    return uv_to_v(peak_uv)[:, None, None] * pattern[None, :, None] * waveform[:, None, :]


def _background(config: SimulationConfig, n_trials: int, rng: np.random.Generator) -> np.ndarray:
    """Pink background from randomly oriented cortical dipoles, shape (n_trials, n_channels, n_times), in V."""
    model = head_model()
    n_sources = model.background_gain.shape[1]
    orientations = _unit(rng.standard_normal((n_sources, 3)))
    strengths = np.exp(BACKGROUND_SOURCE_SPREAD * rng.standard_normal(n_sources))
    mixing = np.einsum("csk,sk->cs", model.background_gain, orientations) * strengths
    eeg_rms = np.sqrt(np.mean(np.sum(mixing[: len(EEG_CHANNELS)] ** 2, axis=1)))
    mixing *= uv_to_v(config.noise_uv) * _subject_scale(config, rng) / eeg_rms
    # mixing @ w with white w (one per source) is Gaussian with covariance M Mᵀ = (U S)(U S)ᵀ,
    # so mixing far fewer white series through U S gives the same distribution.
    left, singular, _ = np.linalg.svd(mixing, full_matrices=False)
    pink = _pink_noise(rng, (n_trials, len(singular)), config.n_times)
    return np.einsum("cr,trn->tcn", left * singular, pink)


def _pink_noise(rng: np.random.Generator, shape: tuple[int, ...], n_times: int) -> np.ndarray:
    """Unit-variance noise with power ∝ 1/f, shape (*shape, n_times).

    Made in a window twice as long and cut from its middle, so the circular FFT's
    wrap-around does not join the epoch's ends and frequencies below 1/epoch exist.
    """
    n_fft = next_fast_len(2 * n_times)
    freqs = rfftfreq(n_fft)
    amplitude = np.zeros_like(freqs)
    amplitude[1:] = freqs[1:] ** -0.5
    # Mean power over the two-sided spectrum: rfft bins except DC and Nyquist count twice.
    weights = np.full_like(freqs, 2.0)
    weights[0] = 1.0
    if n_fft % 2 == 0:
        weights[-1] = 1.0
    amplitude /= np.sqrt(np.sum(weights * amplitude**2) / n_fft)
    spectrum = rfft(rng.standard_normal((*shape, n_fft)), axis=-1) * amplitude
    start = (n_fft - n_times) // 2
    return irfft(spectrum, n=n_fft, axis=-1)[..., start : start + n_times]


def _drift(config: SimulationConfig, session_times: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Slow sinusoids per channel, shape (n_trials, n_channels, n_times), in V.

    session_times : array, shape (n_trials, n_times), in s since the session began
    """
    n_channels = len(CH_NAMES)
    subject_rms = uv_to_v(config.drift_uv) * _subject_scale(config, rng)
    channel_rms = subject_rms * np.exp(DRIFT_CHANNEL_SPREAD * rng.standard_normal(n_channels))
    freqs = rng.uniform(*DRIFT_FREQ_HZ, size=(n_channels, DRIFT_COMPONENTS))
    phases = rng.uniform(0.0, 2.0 * np.pi, size=(n_channels, DRIFT_COMPONENTS))
    # K sinusoids of amplitude A have an RMS of A * sqrt(K / 2).
    amplitudes = channel_rms[:, None] * np.sqrt(2.0 / DRIFT_COMPONENTS)
    angle = 2.0 * np.pi * freqs[None, :, :, None] * session_times[:, None, None, :] + phases[None, :, :, None]
    return np.sum(amplitudes[None, :, :, None] * np.sin(angle), axis=2)


def _line_noise(config: SimulationConfig, session_times: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Mains interference per channel, shape (n_trials, n_channels, n_times), in V."""
    n_channels = len(CH_NAMES)
    amplitudes = uv_to_v(config.line_noise_uv) * rng.uniform(*LINE_CHANNEL_RANGE, size=n_channels)
    phases = rng.uniform(0.0, 2.0 * np.pi, size=n_channels)
    angle = 2.0 * np.pi * config.line_freq_hz * session_times[:, None, :] + phases[None, :, None]
    return amplitudes[None, :, None] * np.sin(angle)


def _blinks(config: SimulationConfig, times: np.ndarray, n_trials: int, rng: np.random.Generator) -> np.ndarray:
    """Eye blinks at random times, shape (n_trials, n_channels, n_times), in V.

    Each blink is a sin² bump; its peak at Fp1/Fp2 (mean) is drawn from ``config.blink_uv``.
    Blinks may start before or end after the epoch, as in a continuous recording.
    """
    has_blink = rng.random(n_trials) < config.blink_rate
    duration = rng.uniform(*BLINK_DURATION_S, size=n_trials)
    start = rng.uniform(times[0] - duration / 2.0, times[-1] - duration / 2.0)
    peak_uv = rng.uniform(*config.blink_uv, size=n_trials) * has_blink
    phase = (times[None, :] - start[:, None]) / duration[:, None]
    bump = np.where((phase >= 0.0) & (phase <= 1.0), np.sin(np.pi * phase) ** 2, 0.0)
    return uv_to_v(peak_uv)[:, None, None] * head_model().blink_pattern[None, :, None] * bump[:, None, :]
