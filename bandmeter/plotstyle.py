"""bandmeter's figure style: print-friendly, colour-blind-safe, the same in every figure.

The palette is the eight-colour set of Okabe and Ito, chosen to stay distinguishable for the
common forms of colour-vision deficiency; every series also differs in line style or fill, so
the figures read in greyscale too. Maps use ``viridis`` (perceptually uniform, readable in
greyscale and with colour-vision deficiency).

The settings are applied with :func:`matplotlib.rc_context` only while a figure is built or
saved (:func:`styled`), never to the global state, so importing bandmeter does not change
anyone else's figures. ``rc_context`` is not thread-safe: build figures in one thread per
process (worker processes are fine).

References
----------
M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and presentations
that are friendly to colorblind people", 2008, https://jfly.uni-koeln.de/color/ (the RGB
values below).
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator

import matplotlib
from cycler import cycler

#: Okabe-Ito colours (Okabe and Ito 2008, RGB as published).
BLACK = "#000000"
ORANGE = "#E69F00"
SKY_BLUE = "#56B4E9"
BLUISH_GREEN = "#009E73"
YELLOW = "#F0E442"
BLUE = "#0072B2"
VERMILLION = "#D55E00"
REDDISH_PURPLE = "#CC79A7"
#: Neutral grey for excluded ranges and grids (not part of the palette).
GREY = "#7F7F7F"

#: Colours of the series, in the order they are used.
PALETTE = (BLUE, ORANGE, BLUISH_GREEN, VERMILLION, REDDISH_PURPLE, SKY_BLUE, YELLOW, BLACK)

#: Colours (and line styles) of the level series of the time history.
SERIES = {
    "LAeq": (BLUE, "-"),
    "LAFmax": (VERMILLION, "-"),
}
#: Colours and line styles of the percentile levels, in order.
PERCENTILE_STYLES = ((BLUISH_GREEN, "--"), (REDDISH_PURPLE, "-."), (ORANGE, ":"),
                     (SKY_BLUE, "--"), (BLACK, ":"))

#: Colour map of the band-time map.
LEVEL_CMAP = "viridis"

#: Resolution of PNG output, dots per inch.
PNG_DPI = 150

#: Width of a full-width figure, inches (fits an A4 page with margins).
FIGURE_WIDTH_IN = 8.0

#: Matplotlib settings applied while a figure is built and saved.
RC = {
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "savefig.facecolor": "white",
    "savefig.edgecolor": "white",
    "axes.edgecolor": "#333333",
    "axes.prop_cycle": cycler(color=list(PALETTE)),
    "axes.grid": True,
    "axes.axisbelow": True,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "grid.color": "#D9D9D9",
    "grid.linewidth": 0.6,
    "lines.linewidth": 1.2,
    "font.family": "DejaVu Sans",
    "font.size": 9.0,
    "axes.titlesize": 10.0,
    "axes.labelsize": 9.0,
    "xtick.labelsize": 8.0,
    "ytick.labelsize": 8.0,
    "legend.fontsize": 8.0,
    "legend.frameon": False,
    "image.cmap": LEVEL_CMAP,
    "svg.fonttype": "path",  # text as outlines: the SVG needs no font files
    "svg.hashsalt": "bandmeter",  # stable element ids: the same figure gives the same SVG
    "svg.image_inline": True,  # rasterised parts embedded, never linked
    "path.simplify": True,
}


@contextlib.contextmanager
def styled() -> Iterator[None]:
    """Apply :data:`RC` for the duration of a ``with`` block (figure building and saving)."""
    with matplotlib.rc_context(RC):
        yield
