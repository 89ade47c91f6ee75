"""The canvas every study figure shares: size, palette, a detached figure, design order.

Colours follow the colour-blind-safe palette of Okabe & Ito (2008), "Color
Universal Design", chosen to stay distinct under the common colour-vision
deficiencies; line styles and marker fills carry the rest of the meaning.
"""

from __future__ import annotations

import numpy as np

__all__ = ["FIGURE_DPI", "FIGURE_SIZE_PX", "PALETTE", "TRUTH_COLOUR", "colour", "new_figure",
           "axes_or_new", "design_labels", "spread"]

FIGURE_SIZE_PX = (1000, 600)
FIGURE_DPI = 100
# Okabe & Ito (2008): blue, vermillion, bluish green, reddish purple, orange, sky blue,
# black (yellow left out: too pale on white).
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")
TRUTH_COLOUR = "#333333"


def colour(index: int) -> str:
    """Return the palette colour of the design at ``index``."""
    return PALETTE[index % len(PALETTE)]


def new_figure():
    """Return a figure of the report's size, detached from pyplot (Agg canvas)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    width, height = FIGURE_SIZE_PX
    fig = Figure(figsize=(width / FIGURE_DPI, height / FIGURE_DPI), dpi=FIGURE_DPI,
                 layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def axes_or_new(ax):
    """Return ``ax``, or the axes of a new figure of the report's size."""
    return ax if ax is not None else new_figure().add_subplot()


def design_labels(study) -> list[str]:
    """Return the study's design labels in scenario order (which fixes their colours)."""
    return [spec.label for spec in study.scenario.designs]


def spread(n: int, width: float) -> np.ndarray:
    """Return fixed offsets in [-width/2, width/2) that spread n points (golden-ratio steps)."""
    return ((np.arange(n) * 0.6180339887) % 1.0 - 0.5) * width
