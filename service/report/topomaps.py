"""Scalp maps of the per-channel statistic (t or U, as the result names it), drawn with MNE's ``plot_topomap`` from 10-20 positions.

Positions come from MNE's standard 10-20 montage by channel name (``epoch_assay.engine.montage``);
channels the montage does not know are left off the map (and named in the caption), since a
map needs a place for each.
"""

from collections.abc import Sequence
from dataclasses import dataclass

import matplotlib

matplotlib.use("Agg")

import mne
import numpy as np
from matplotlib.figure import Figure

from epoch_assay.engine.montage import montage_positions
from service.report.figures import plain_text
from service.report.palette import INK, T_COLOURMAP
from service.report.summary import ChannelMap

MIN_PLACED_CHANNELS = 3
#: How a figure names each channel statistic of the result document (``statistic_name``).
STATISTIC_LABELS = {
    "welch_t": "Welch t, first − second condition",
    "student_t": "Student t, first − second condition",
    "mann_whitney_u": "Mann–Whitney U of the first condition",
    "welch_t_permutation": "Welch t, first − second condition (p by label permutation)",
}


def statistic_label(statistic_name: str) -> str:
    """The figure label of a channel statistic; its own name when the label is unknown."""
    return STATISTIC_LABELS.get(statistic_name, statistic_name)


MAP_SIZE_IN = 3.0


@dataclass(frozen=True)
class PlacedMap:
    """The part of a channel map that can be drawn: channels with a known position and a finite statistic."""

    map: ChannelMap
    info: mne.Info
    keep: np.ndarray
    unplaced: tuple[str, ...]


def place(channel_map: ChannelMap) -> PlacedMap | None:
    """Positions for the channels of ``channel_map``; None when fewer than three can be placed."""
    positions = montage_positions(channel_map.ch_names)
    keep = np.isfinite(positions).all(axis=1) & np.isfinite(channel_map.statistic)
    if keep.sum() < MIN_PLACED_CHANNELS:
        return None
    names = [name for name, kept in zip(channel_map.ch_names, keep, strict=False) if kept]
    info = mne.create_info(names, sfreq=100.0, ch_types="eeg")
    info.set_montage(
        mne.channels.make_dig_montage(ch_pos=dict(zip(names, positions[keep], strict=False)), coord_frame="head"),
        verbose=False,
    )
    unplaced = tuple(name for name, kept in zip(channel_map.ch_names, keep, strict=False) if not kept)
    return PlacedMap(map=channel_map, info=info, keep=keep, unplaced=unplaced)


def shared_limit(maps: Sequence[PlacedMap]) -> float:
    """The largest |statistic| over the maps, so maps of one run share a symmetric colour scale."""
    return max((float(np.nanmax(np.abs(placed.map.statistic[placed.keep]))) for placed in maps), default=0.0) or 1.0


def topomap_figure(placed: PlacedMap, reference: str, limit: float) -> Figure:
    """The scalp map of one pipeline on the scale [-limit, limit]; significant channels as white dots."""
    figure = Figure(figsize=(MAP_SIZE_IN + 0.9, MAP_SIZE_IN + 0.5), layout="constrained")
    ax = figure.subplots()
    image, _ = mne.viz.plot_topomap(
        placed.map.statistic[placed.keep],
        placed.info,
        axes=ax,
        show=False,
        cmap=T_COLOURMAP,
        vlim=(-limit, limit),
        mask=placed.map.significant[placed.keep],
        contours=4,
        sensors=True,
        mask_params={
            "marker": "o",
            "markerfacecolor": "white",
            "markeredgecolor": INK,
            "markersize": 7,
            "linewidth": 0,
        },
    )
    suffix = " (reference)" if placed.map.pipeline == reference else ""
    ax.set_title(plain_text(f"{placed.map.pipeline}{suffix}") + "\nwhite dots: significant", fontsize=10)
    colourbar = figure.colorbar(image, ax=ax, shrink=0.8, pad=0.02)
    colourbar.set_label(statistic_label(placed.map.statistic_name), fontsize=9)
    return figure
