"""Independent component analysis: fit with MNE, remove ocular and muscle components.

The decomposition is ``mne.preprocessing.ICA`` on the EEG channels not marked bad,
seeded by ``seed`` so the same data give the same components. By default the algorithm
is Picard (Ablin, Cardoso & Gramfort, 2018, IEEE Trans. Signal Process. 66:4040), which
reaches the extended-Infomax solution in a fraction of the iterations; FastICA and
(extended) Infomax stay available.

Fitting copy
    The unmixing matrix is fitted on a copy of the data and applied to the data as they
    are. The copy is high-passed at ``fit_highpass_hz`` (1 Hz by default; Butterworth,
    order 4, forward and backward): slow drifts are non-stationary and degrade the
    decomposition, and fitting on 1 Hz high-passed data and applying the unmixing to the
    unfiltered data keeps the ERP's slow parts while the components stay those of the
    filtered fit (Winkler, Debener, Müller & Tangermann, 2015, Proc. IEEE EMBC, 4101;
    Klug & Gramann, 2021, Eur. J. Neurosci. 54:8406). The copy then keeps only every
    q-th sample, with q as large as leaves at least ``FIT_SAMPLES_PER_WEIGHT`` samples per
    unmixing weight (n_components²): ICA's model is instantaneous, so the unmixing depends
    on the distribution of the channel vectors, not on their order in time, and a regular
    subsample of enough of them estimates the same matrix (common practice: 20-30 samples
    per weight and more, Onton & Makeig, 2006, Prog. Brain Res. 159:99; the figure is
    recalled from that source).
Component count
    By default the rank of the data (an average reference or an interpolation removes
    one dimension each), so no component is fitted to numerical noise; an integer or a
    share of variance may be given instead.

Components are then scored on the sources of the data as they are:

ocular
    the largest absolute correlation, after a 1-10 Hz band-pass (where blinks and
    saccades have their power, as in MNE's ``find_bads_eog``), between the component's
    time course and an EOG channel; when the set has no EOG channel, the frontopolar
    EEG channels stand in for one. A score above ``threshold`` removes the component.
muscle
    the slope of the component's log power against log frequency over 7-45 Hz. Brain
    activity falls as 1/f (slope about -1 to -2); muscle activity is broadband and its
    slope is near zero or positive (Muthukumaraswamy, 2013, Front. Hum. Neurosci.
    7:138). A slope above ``threshold`` removes the component.
"""

import importlib.util
from typing import Any, ClassVar, Literal

import mne
import numpy as np
from pydantic import BaseModel, ConfigDict, Field, field_validator

from epoch_assay.engine.epochs import SCORED_CHANNEL_TYPES, EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.provenance import NUMERICAL_PACKAGES, Stage, StepOutputs, StepProvenanceBase
from epoch_assay.engine.steps.base import Step
from epoch_assay.engine.steps.filters import design_iir, iir_zero_phase
from epoch_assay.engine.steps.mne_bridge import MNE_QUIET, to_mne_epochs
from epoch_assay.engine.steps.spectra import mean_channel_psd

FRONTAL_PROXY_CHANNELS = ("Fp1", "Fp2", "Fpz", "AF7", "AF8")
OCULAR_BAND_HZ = (1.0, 10.0)
MUSCLE_BAND_HZ = (7.0, 45.0)
# Eigenvalues of the channel covariance below this fraction of the largest count as zero
# when the rank is estimated (an average reference or an interpolation removes one each).
RANK_TOLERANCE = 1e-8
# The fitting copy keeps at least this many samples per unmixing weight (see "Fitting copy").
FIT_SAMPLES_PER_WEIGHT = 30
FIT_HIGHPASS_ORDER = 4

IcaMethod = Literal["fastica", "infomax", "extended_infomax", "picard"]
# The package each method needs beyond MNE, by import name.
_METHOD_PACKAGES = {"fastica": "sklearn", "picard": "picard"}
_PACKAGE_NAMES = {"sklearn": "scikit-learn", "picard": "python-picard"}


class _Threshold(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class OcularCriterion(_Threshold):
    threshold: float = Field(0.6, gt=0.0, lt=1.0, description="Lowest |r| with an EOG (or frontal) channel removed.")


class MuscleCriterion(_Threshold):
    threshold: float = Field(-0.5, gt=-5.0, lt=5.0, description="Lowest log-log spectral slope over 7-45 Hz removed.")


class ComponentRemoved(BaseModel):
    """An ICA component taken out of the data."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    index: int = Field(ge=0, description="Index of the component in the decomposition.")
    kind: Literal["ocular", "muscle"] = Field(description="Which criterion removed it.")
    score: float = Field(
        description="The criterion's score: |r| with an EOG (or frontal) channel for ocular, the log-log spectral "
        "slope for muscle."
    )


class IcaOutputs(StepOutputs):
    """What ICA reports."""

    components_removed: list[ComponentRemoved] = Field(
        default_factory=list, description="Components removed, by index."
    )


def data_rank(data: np.ndarray) -> int:
    """Numerical rank of the channels of ``data``, shape (n_trials, n_channels, n_times)."""
    rows = (data - data.mean(axis=-1, keepdims=True)).transpose(1, 0, 2).reshape(data.shape[1], -1)
    eigenvalues = np.linalg.eigvalsh(rows @ rows.T)
    return int(np.sum(eigenvalues > RANK_TOLERANCE * eigenvalues.max()))


def ocular_scores(sources: np.ndarray, references: np.ndarray, sfreq: float) -> np.ndarray:
    """Largest |r| of each component with any reference channel, both band-passed to 1-10 Hz.

    sources : array, shape (n_trials, n_components, n_times)
    references : array, shape (n_trials, n_references, n_times), in V
    Returns shape (n_components,).
    """
    sos = design_iir("bandpass", OCULAR_BAND_HZ, 4, sfreq)
    filtered = iir_zero_phase(np.concatenate([sources, references], axis=1), sos)
    rows = filtered.transpose(1, 0, 2).reshape(filtered.shape[1], -1)
    correlation = np.corrcoef(rows)[: sources.shape[1], sources.shape[1] :]
    return np.abs(np.nan_to_num(correlation)).max(axis=-1)


def spectral_slopes(sources: np.ndarray, sfreq: float) -> np.ndarray:
    """Least-squares slope of log10 power against log10 frequency over 7-45 Hz, shape (n_components,)."""
    freqs, psd = mean_channel_psd(sources, sfreq)
    in_band = (freqs >= MUSCLE_BAND_HZ[0]) & (freqs <= min(MUSCLE_BAND_HZ[1], sfreq / 2.0))
    design = np.column_stack([np.ones(in_band.sum()), np.log10(freqs[in_band])])
    coefficients, *_ = np.linalg.lstsq(design, np.log10(psd[:, in_band]).T, rcond=None)
    return coefficients[1]


class Ica(Step):
    """Decompose the good EEG channels by ICA and remove ocular and muscle components."""

    step: Literal["ica"] = "ica"
    stage: ClassVar[Stage] = Stage.CONTINUOUS
    Outputs: ClassVar[type[StepOutputs]] = IcaOutputs
    examples: ClassVar[tuple[dict[str, Any], ...]] = (
        {"n_components": 6, "seed": 1},
        {"n_components": 0.9, "seed": 2, "ocular": None, "muscle": {"threshold": -0.5}},
    )

    method: IcaMethod = Field("picard", description="Which MNE ICA algorithm fits the decomposition.")
    n_components: int | float | None = Field(
        None,
        description="Number of components, or the fraction of variance (0-1) the kept PCA components explain; "
        "null: the rank of the data.",
    )
    fit_highpass_hz: float | None = Field(
        1.0,
        gt=0.0,
        allow_inf_nan=False,
        description="High-pass of the copy the decomposition is fitted on, in Hz (the data themselves are not "
        "filtered); null fits on the data as they are.",
    )
    seed: int = Field(0, ge=0, description="Seed of the algorithm's random start.")
    ocular: OcularCriterion | None = Field(default_factory=OcularCriterion)
    muscle: MuscleCriterion | None = None

    @field_validator("n_components")
    @classmethod
    def _component_count_or_fraction(cls, value: int | float | None) -> int | float | None:
        if isinstance(value, int) and value < 2:
            raise ValueError("n_components must be at least 2 components, or a fraction of variance in (0, 1)")
        if isinstance(value, float) and not 0.0 < value < 1.0:
            raise ValueError("a fractional n_components is a share of variance and must lie in (0, 1)")
        return value

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        package = _METHOD_PACKAGES.get(self.method)
        if package and importlib.util.find_spec(package) is None:
            raise SpecError(
                ("method",),
                f"ICA method {self.method!r} needs the package {_PACKAGE_NAMES[package]}, which this service does "
                "not have; choose 'infomax' or 'extended_infomax'",
            )
        n_eeg = sum(kind in SCORED_CHANNEL_TYPES for kind in meta.ch_types)
        if isinstance(self.n_components, int) and self.n_components > n_eeg:
            raise SpecError(
                ("n_components",),
                f"{self.n_components} components cannot be found in {n_eeg} EEG channels; choose at most {n_eeg}, "
                "or a fraction of variance such as 0.99",
            )
        if self.fit_highpass_hz is not None and self.fit_highpass_hz >= meta.nyquist:
            raise SpecError(
                ("fit_highpass_hz",),
                f"fit_highpass_hz {self.fit_highpass_hz:g} Hz is not below the Nyquist frequency of "
                f"{meta.nyquist:g} Hz; choose a lower one (1 Hz is usual) or null",
            )
        if self.muscle and meta.nyquist <= MUSCLE_BAND_HZ[0] * 2:
            raise SpecError(
                ("muscle",),
                f"the muscle criterion fits a slope from {MUSCLE_BAND_HZ[0]:g} Hz up, which needs a Nyquist "
                f"frequency above {MUSCLE_BAND_HZ[0] * 2:g} Hz; remove it",
            )
        return meta

    def dependencies(self) -> tuple[str, ...]:
        package = _METHOD_PACKAGES.get(self.method)
        return NUMERICAL_PACKAGES if package is None else (*NUMERICAL_PACKAGES, _PACKAGE_NAMES[package])

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepProvenanceBase]:
        picks = epochs.picks(SCORED_CHANNEL_TYPES, exclude_bads=True)
        mne_epochs = to_mne_epochs(epochs, picks)
        rank = data_rank(mne_epochs.get_data())
        warnings = []
        n_components = rank if self.n_components is None else self.n_components
        if isinstance(n_components, int) and n_components > rank:
            warnings.append(f"the data have rank {rank}, so {rank} components were fitted, not {n_components}")
            n_components = rank
        ica = mne.preprocessing.ICA(
            n_components=n_components,
            method="infomax" if self.method == "extended_infomax" else self.method,
            fit_params={"extended": True} if self.method == "extended_infomax" else None,
            random_state=self.seed,
            max_iter="auto",
            verbose=MNE_QUIET,
        )
        ica.fit(
            self._fitting_copy(mne_epochs, n_components if isinstance(n_components, int) else rank), verbose=MNE_QUIET
        )
        sources = ica.get_sources(mne_epochs).get_data()
        removed, criterion_warnings = self._components_to_remove(epochs, sources)
        warnings.extend(criterion_warnings)
        data = epochs.data.astype(np.float64, copy=True)
        if removed:
            cleaned = ica.apply(mne_epochs.copy(), exclude=[c.index for c in removed], verbose=MNE_QUIET)
            data[:, picks] = cleaned.get_data()
        return epochs.with_changes(data=data), self.record(components_removed=removed, warnings=warnings)

    def _fitting_copy(self, mne_epochs: mne.EpochsArray, n_components: int) -> mne.EpochsArray:
        """The epochs the unmixing is fitted on: high-passed, then every q-th sample (see the module docstring)."""
        data = mne_epochs.get_data()
        info = mne_epochs.info.copy()
        if self.fit_highpass_hz is not None:
            sos = design_iir("highpass", self.fit_highpass_hz, FIT_HIGHPASS_ORDER, info["sfreq"])
            data = iir_zero_phase(data, sos)
        n_samples = data.shape[0] * data.shape[-1]
        step = max(1, n_samples // (FIT_SAMPLES_PER_WEIGHT * n_components**2))
        with info._unlock():
            info["sfreq"] = info["sfreq"] / step
            info["highpass"] = max(info["highpass"], self.fit_highpass_hz or 0.0)
            info["lowpass"] = min(info["lowpass"], info["sfreq"] / 2.0)
        return mne.EpochsArray(data[..., ::step], info, tmin=mne_epochs.tmin, baseline=None, verbose=MNE_QUIET)

    def _components_to_remove(self, epochs: EpochSet, sources: np.ndarray) -> tuple[list[ComponentRemoved], list[str]]:
        removed: dict[int, ComponentRemoved] = {}
        warnings: list[str] = []
        if self.muscle:
            for index, slope in enumerate(spectral_slopes(sources, epochs.sfreq)):
                if slope > self.muscle.threshold:
                    removed[index] = ComponentRemoved(index=index, kind="muscle", score=round(float(slope), 4))
        if self.ocular:
            references = self._ocular_references(epochs)
            if references.size:
                for index, score in enumerate(ocular_scores(sources, epochs.data[:, references], epochs.sfreq)):
                    if score > self.ocular.threshold:
                        removed[index] = ComponentRemoved(index=index, kind="ocular", score=round(float(score), 4))
            else:
                warnings.append(
                    "no EOG channel and no frontopolar EEG channel (Fp1, Fp2, Fpz, AF7, AF8) to compare components "
                    "with, so no ocular component was removed"
                )
        return [removed[index] for index in sorted(removed)], warnings

    def _ocular_references(self, epochs: EpochSet) -> np.ndarray:
        """EOG channels, or when there are none the good frontopolar EEG channels present."""
        eog = epochs.picks(("eog",), exclude_bads=True)
        if eog.size:
            return eog
        good = set(epochs.picks(SCORED_CHANNEL_TYPES, exclude_bads=True).tolist())
        proxies = [i for i, name in enumerate(epochs.ch_names) if name in FRONTAL_PROXY_CHANNELS and i in good]
        return np.array(proxies, dtype=int)
