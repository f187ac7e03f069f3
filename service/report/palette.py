"""The report's colours: chosen so they stay apart for readers with colour-vision deficiencies.

Consecutive colours step up in CIE L* lightness by about 8–12 units (INK 12, BLUE 40, RUST 50,
TEAL 60, AMBER 72, MIST 80), so they can be told apart by lightness alone, as in a greyscale
print or with achromatopsia. Neighbours in the cycle also alternate between the blue and the
yellow–orange side, the contrast that red–green deficiencies (protan, deutan) keep. The
diverging map for t values runs from BLUE through white to RUST for the same reason.
"""

from matplotlib.colors import LinearSegmentedColormap

INK = "#1f1d3a"
BLUE = "#2a5fa8"
RUST = "#c7551e"
TEAL = "#3f9fa0"
AMBER = "#e8a33d"
MIST = "#a9cbe8"

REFERENCE_COLOUR = INK
PIPELINE_COLOURS = (BLUE, RUST, TEAL, AMBER, MIST)
CONDITION_COLOURS = (BLUE, AMBER)

T_COLOURMAP = LinearSegmentedColormap.from_list("epoch_assay_t", [BLUE, "#ffffff", RUST])


def pipeline_colour(index: int) -> str:
    """Colour of the ``index``-th non-reference pipeline (the cycle repeats after five)."""
    return PIPELINE_COLOURS[index % len(PIPELINE_COLOURS)]
