"""The reference electrode standardization technique (REST; Yao, 2001) on a spherical head.

REST estimates the potentials against a point at infinity from average-referenced data
and a forward model ``G`` (channels × dipoles) of the head: with ``Ga = G - mean(G)``
(the forward model average-referenced), the sources ``Ga⁺ Va`` reproduce the data and
``G Ga⁺ Va`` are the potentials at infinity (Yao, 2001, eq. 8). Those differ from ``Va``
by one signal common to all channels, so REST is a reference like any other: a weighted
mean ``r · V`` of the channels, subtracted from every channel. The weights are computed
once per electrode layout.

The head is MNE's three-layer sphere fitted to the electrode positions
(``mne.make_sphere_model("auto", "auto")``) with a volume grid of free-orientation
dipoles (``SOURCE_SPACING_M`` apart, none closer than ``SOURCE_EXCLUDE_M`` to the
centre), as in MNE's REST example.
"""

from functools import lru_cache

import mne
import numpy as np

from epoch_assay.engine.steps.mne_bridge import MNE_QUIET

SOURCE_SPACING_M = 0.015
SOURCE_EXCLUDE_M = 0.030
# Singular values below this fraction of the largest are dropped from the pseudo-inverse
# of the average-referenced leadfield (the same tolerance MNE uses for REST).
PINV_RTOL = 1e-6


def rest_reference_weights(positions: np.ndarray) -> np.ndarray:
    """Weights ``r``, shape (n_channels,), such that ``V - r · V`` is the REST-referenced data.

    positions : array, shape (n_channels, 3), in m, of the channels the reference is built from
    """
    return _cached_weights(_positions_key(positions)).copy()


def _positions_key(positions: np.ndarray) -> tuple[tuple[float, float, float], ...]:
    # Rounded to a nanometre so that the same layout read twice hits the cache.
    return tuple((round(float(x), 9), round(float(y), 9), round(float(z), 9)) for x, y, z in np.asarray(positions))


@lru_cache(maxsize=16)
def _cached_leadfield(key: tuple[tuple[float, float, float], ...]) -> np.ndarray:
    """Free-orientation leadfield, shape (n_channels, 3 * n_dipoles), in V per A·m, of the positions in ``key`` (m)."""
    positions = np.array(key, dtype=float)
    names = [f"E{i}" for i in range(len(positions))]
    info = mne.create_info(names, 1000.0, "eeg", verbose=MNE_QUIET)
    info.set_montage(
        mne.channels.make_dig_montage(ch_pos=dict(zip(names, positions, strict=False)), coord_frame="head"),
        verbose=MNE_QUIET,
    )
    sphere = mne.make_sphere_model("auto", "auto", info, verbose=MNE_QUIET)
    source_space = mne.setup_volume_source_space(
        sphere=sphere, pos=SOURCE_SPACING_M * 1000.0, exclude=SOURCE_EXCLUDE_M * 1000.0, verbose=MNE_QUIET
    )
    forward = mne.make_forward_solution(
        info, trans=None, src=source_space, bem=sphere, meg=False, eeg=True, verbose=MNE_QUIET
    )
    leadfield = np.array(forward["sol"]["data"], dtype=float)
    leadfield.setflags(write=False)
    return leadfield


@lru_cache(maxsize=16)
def _cached_weights(key: tuple[tuple[float, float, float], ...]) -> np.ndarray:
    leadfield = _cached_leadfield(key)
    n_channels = leadfield.shape[0]
    averaged = leadfield - leadfield.mean(axis=0, keepdims=True)
    to_infinity = leadfield @ np.linalg.pinv(averaged, rtol=PINV_RTOL)
    # V_rest = V_avg + mean_rows(to_infinity) @ V_avg and V_avg = H V with H = I - 11ᵀ/n,
    # so V_rest = V - (1/n - H w) · V with w the column means of to_infinity.
    column_means = to_infinity.mean(axis=0)
    weights = np.full(n_channels, 1.0 / n_channels) - (column_means - column_means.mean())
    weights.setflags(write=False)
    return weights
