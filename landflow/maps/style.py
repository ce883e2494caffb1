"""landflow's visual identity, in one place: colours, palettes, fonts and layout of maps, charts and the report.

The look is our own: warm "field notebook" paper, dark slate ink, a teal accent,
thin frames with a coordinate grid, labels with a paper-coloured halo. Every
picture landflow draws takes its colours and sizes from here, and the HTML
report's stylesheet is filled from :data:`PAGE` so maps and page match.

Palettes are chosen by the kind of quantity:

* magnitudes (current, visits, steps, gain): ``cividis``, perceptually uniform
  and readable with colour-vision deficiency (Nuñez, Anderton & Renslow 2018,
  "Optimizing colormaps with consideration for color vision deficiency",
  PLoS ONE 13: e0199239, doi:10.1371/journal.pone.0199239);
* probabilities (0 to 1, fixed range): ``viridis`` (van der Walt & Smith 2015,
  the matplotlib default map designed to be perceptually uniform and CVD safe);
* signed changes (what-if, gain): ``PuOr`` (orange for less, purple for more),
  a diverging scheme with a light centre and matched lightness steps on both
  sides, marked colour-blind safe by its authors (Harrower & Brewer 2003,
  "ColorBrewer.org: an online tool for selecting colour schemes for maps",
  Cartographic J. 40: 27-37, doi:10.1179/000870403235002042), always centred on
  zero so that white means "no change"; ratios to a reference (the regional
  current against a uniform landscape) take the same palette on a log scale,
  centred on 1;
* classes (patch ids, destinations): the nine "muted" colours of Tol (2021,
  "Colour schemes", SRON technical note SRON/EPS/TN/09-002), distinguishable
  by people with the common colour-vision deficiencies and never black (which
  would hide frames and labels), with a discrete legend; past nine classes the
  colours repeat and the labels on the map tell the classes apart;
* counts (pairs through a cell): ``cividis`` sampled at whole numbers, one legend
  entry per count.
"""

from __future__ import annotations

__all__ = ["INK", "PAPER", "ACCENT", "MUTED", "NODATA", "NODATA_HATCH", "CHANGE_MARK", "PATCH_EDGE",
           "SEQUENTIAL", "PROBABILITY", "DIVERGING", "QUALITATIVE", "BACKDROP", "FONT", "FONT_SIZE",
           "MAP_WIDTH_INCHES", "MAP_DPI", "CHART_WIDTH_INCHES", "PAGE", "matplotlib_style"]

# -- colours ------------------------------------------------------------------------------------------------
INK = "#1f2a30"          # text, frames, patch outlines: dark slate
PAPER = "#faf8f3"        # figure and page background: warm off-white
ACCENT = "#0f7c80"       # teal: headings, chart marks, scale bar
MUTED = "#6b7479"        # secondary text, grid lines
NODATA = "#d8d3c8"       # outside the landscape: warm neutral grey, lighter than every palette's darkest end
NODATA_HATCH = "#a79f90"  # its diagonal hatch, so nodata never reads as a low value
CHANGE_MARK = "#009e73"  # outline of cells a what-if changed (bluish green: apart from orange and purple)
PATCH_EDGE = INK         # patch outlines

# -- palettes -----------------------------------------------------------------------------------------------
SEQUENTIAL = "cividis"
PROBABILITY = "viridis"
DIVERGING = "PuOr"
BACKDROP = "Greys"       # faint resistance under sparse layers, drawn with BACKDROP_ALPHA
BACKDROP_RANGE = (0.08, 0.45)  # the part of the grey ramp used: faint, never black
QUALITATIVE = ("#cc6677", "#88ccee", "#ddcc77", "#117733", "#aa4499", "#44aa99", "#999933", "#882255", "#332288")

# -- type and layout ----------------------------------------------------------------------------------------
FONT = ["DejaVu Sans", "sans-serif"]   # ships with matplotlib: the same on every machine
FONT_SIZE = 8.5
MAP_WIDTH_INCHES = 7.0
MAP_DPI = 130
CHART_WIDTH_INCHES = 6.4
LABEL_FONT_SIZE = 8.0    # patch labels on maps
MAX_MAP_PIXELS = 1_500_000  # larger grids are drawn from a block-reduced copy of at most this many cells

# The HTML report's colours and fonts (filled into its stylesheet).
PAGE = {
    "ink": INK, "paper": PAPER, "accent": ACCENT, "muted": MUTED, "rule": "#e3ded3", "card": "#ffffff",
    "caution": "#fff4d6", "caution_edge": "#c9a227",
    "font": '"Source Sans 3", "Noto Sans", "Segoe UI", "DejaVu Sans", Helvetica, Arial, sans-serif',
    "mono": '"DejaVu Sans Mono", "Noto Sans Mono", Menlo, Consolas, monospace',
}


def matplotlib_style():
    """The rcParams every landflow figure is drawn with (use with ``matplotlib.rc_context``)."""
    return {
        "font.family": "sans-serif", "font.sans-serif": FONT, "font.size": FONT_SIZE,
        "text.color": INK, "axes.labelcolor": INK, "axes.edgecolor": INK, "axes.linewidth": 0.6,
        "axes.titlesize": FONT_SIZE + 2, "axes.titleweight": "bold", "axes.titlelocation": "left",
        "axes.facecolor": PAPER, "figure.facecolor": PAPER, "savefig.facecolor": PAPER,
        "xtick.color": INK, "ytick.color": INK, "xtick.labelsize": FONT_SIZE - 1, "ytick.labelsize": FONT_SIZE - 1,
        "xtick.major.width": 0.5, "ytick.major.width": 0.5, "grid.color": MUTED, "grid.linewidth": 0.3,
        "grid.alpha": 0.5, "axes.prop_cycle": __import__("cycler").cycler(color=[ACCENT, *QUALITATIVE]),
        "svg.fonttype": "none", "legend.frameon": False, "legend.fontsize": FONT_SIZE - 0.5,
    }
