"""What every figure shares: size, palette, a detached figure, spreading points.

Colours follow the colour-blind-safe palette of Okabe & Ito (2008), "Color
Universal Design".
"""

from __future__ import annotations

import numpy as np

__all__ = ["FIGURE_DPI", "FIGURE_SIZE_PX", "PALETTE", "STOCK_DAYS"]

FIGURE_SIZE_PX = (1000, 600)
FIGURE_DPI = 100
# Okabe & Ito (2008): blue, vermillion, bluish green, reddish purple, orange, sky blue,
# black (yellow left out: too pale on white).
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")
_TRUTH = "#333333"
_BAND = "#BBBBBB"
_UNITS = "fulfilled orders per user over the horizon"
# Sample pools: four Okabe & Ito colours not read as designs in this figure.
_POOL_COLOURS = ("#000000", "#E69F00", "#56B4E9", "#009E73", "#CC79A7", "#0072B2")
STOCK_DAYS = 7  # days of hourly stock shown in the stock figure


def _colour(index: int) -> str:
    return PALETTE[index % len(PALETTE)]


def _new_figure():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    width, height = FIGURE_SIZE_PX
    fig = Figure(figsize=(width / FIGURE_DPI, height / FIGURE_DPI), dpi=FIGURE_DPI,
                 layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _axes(ax):
    return ax if ax is not None else _new_figure().add_subplot()


def _spread(n: int, width: float) -> np.ndarray:
    """Return fixed offsets in [-width/2, width/2) that spread n points (golden-ratio steps)."""
    return ((np.arange(n) * 0.6180339887) % 1.0 - 0.5) * width


