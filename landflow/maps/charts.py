"""The report's charts, drawn with matplotlib in landflow's style and returned as inline SVG text.

Each function takes plain arrays and labels and returns an ``<svg>`` string
that scales to its container. Points that name a pair carry an SVG
``<title>``, which browsers show as hover text.
"""

from __future__ import annotations

import html
import io
import re

import numpy as np

from . import style

__all__ = ["number_text", "pair_scatter", "heat_map", "cluster_order", "ranked_bars", "estimates_with_errors", "timeline"]


def _figure(height_ratio=0.62, width=None):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    width = width or style.CHART_WIDTH_INCHES
    fig = Figure(figsize=(width, width * height_ratio), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _svg(fig, name, titles=None):
    """The figure as inline SVG; ``titles`` maps a gid to hover texts for its marks, in drawing order."""
    import matplotlib
    buffer = io.StringIO()
    with matplotlib.rc_context({**style.matplotlib_style(), "svg.hashsalt": name}):
        fig.savefig(buffer, format="svg", metadata={"Date": None})  # same folder, same page
    text = buffer.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r'<svg([^>]*?) width="[^"]+" height="[^"]+"', r'<svg\1 class="chart" role="img"', text, count=1)
    for gid, labels in (titles or {}).items():
        start = text.find(f'<g id="{gid}"')
        if start < 0:
            continue
        end = text.index("</g>", start)
        group = text[start:end]
        marks = iter(labels)

        def add_title(match):
            label = next(marks, None)
            return match.group(0) if label is None else f"{match.group(1)}><title>{html.escape(label)}</title></use>"
        group = re.sub(r'(<use [^>]*?)\s*/>', add_title, group)
        text = text[:start] + group + text[end:]
    return text


def _styled(draw):
    """Run a drawing function inside landflow's matplotlib style."""
    def wrapper(*args, **kwargs):
        import matplotlib
        with matplotlib.rc_context(style.matplotlib_style()):
            return draw(*args, **kwargs)
    wrapper.__doc__, wrapper.__name__ = draw.__doc__, draw.__name__
    return wrapper


@_styled
def pair_scatter(x, y, names, *, xlabel, ylabel, title=""):
    """One point per pair on log axes (both positive); hovering a point names its pair."""
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    keep = np.isfinite(x) & np.isfinite(y) & (x > 0) & (y > 0)
    fig = _figure()
    ax = fig.add_subplot()
    points = ax.scatter(x[keep], y[keep], s=26, color=style.ACCENT, edgecolor=style.INK, linewidth=0.4, alpha=0.85)
    points.set_gid("pair-points")
    ax.set_xscale("log")
    ax.set_yscale("log")
    _readable_log_ticks(ax.xaxis, x[keep])
    _readable_log_ticks(ax.yaxis, y[keep])
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.grid(True, which="both")
    if title:
        ax.set_title(title)
    return _svg(fig, "pair-scatter", {"pair-points": [n for n, k in zip(names, keep) if k]})


def _readable_log_ticks(axis, values):
    """At least three labelled ticks on a log axis, also when the data span less than a decade."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, LogLocator, MaxNLocator, NullFormatter, NullLocator
    if values.size == 0:
        return
    lo, hi = values.min(), values.max()
    if hi / lo < 10:   # less than a decade: round linear ticks read better than powers of ten
        ticks = MaxNLocator(nbins=5).tick_values(lo, hi)
        axis.set_major_locator(FixedLocator([t for t in ticks if t > 0]))
        axis.set_minor_locator(NullLocator())
    else:
        axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    axis.set_major_formatter(FuncFormatter(lambda v, _: number_text(v)))
    axis.set_minor_formatter(NullFormatter())


def number_text(value, digits=4):
    """A number as people read it: thin-space thousands, no exponent between 0.001 and 10 million."""
    if not np.isfinite(value):
        return "∞" if value > 0 else "–"
    magnitude = abs(value)
    if value == 0:
        return "0"
    if magnitude >= 1000 and magnitude < 1e7:
        return f"{value:,.0f}".replace(",", "\u2009")
    if 1e-3 <= magnitude < 1000:
        return f"{value:.{digits}g}"
    return f"{value:.{max(digits - 2, 2)}g}"


def cluster_order(matrix):
    """An order of the rows of a symmetric distance matrix that puts similar rows together.

    Average-linkage hierarchical clustering (scipy.cluster.hierarchy, UPGMA:
    Sokal & Michener 1958) and its dendrogram's leaf order; infinite distances
    (pieces no walk connects) count as twice the largest finite one.
    """
    from scipy.cluster.hierarchy import leaves_list, linkage
    from scipy.spatial.distance import squareform
    d = np.array(matrix, dtype=float)
    n = d.shape[0]
    if n < 3:
        return np.arange(n)
    finite = d[np.isfinite(d)]
    d[~np.isfinite(d)] = 2 * finite.max() if finite.size and finite.max() > 0 else 1.0
    d = (d + d.T) / 2
    np.fill_diagonal(d, 0.0)
    return leaves_list(linkage(squareform(d, checks=False), method="average"))


@_styled
def heat_map(matrix, row_labels, col_labels, *, units, xlabel, ylabel, name, cmap=None, log=False,
             annotate=None):
    """A matrix as coloured cells with a labelled colour bar; hovering a cell gives its row, column and value."""
    import matplotlib
    from matplotlib.colors import LogNorm, Normalize
    m = np.asarray(matrix, dtype=float)
    rows, cols = m.shape
    size = min(max(2.6 + 0.32 * max(rows, cols), 3.6), style.CHART_WIDTH_INCHES)
    fig = _figure(height_ratio=0.85, width=size + 1.4)
    ax = fig.add_subplot()
    finite = m[np.isfinite(m)]
    positive = finite[finite > 0]
    norm = (LogNorm(positive.min(), positive.max()) if log and positive.size and positive.max() > positive.min()
            else Normalize(finite.min() if finite.size else 0, finite.max() if finite.size else 1))
    colours = matplotlib.colormaps[cmap or style.SEQUENTIAL]
    image = ax.imshow(np.ma.masked_invalid(np.where(m > 0, m, np.nan) if log else m), cmap=colours, norm=norm,
                      aspect="equal", interpolation="nearest")
    ax.set_facecolor(style.NODATA)
    ax.set_xticks(range(cols), col_labels, rotation=90 if cols > 8 else 0)
    ax.set_yticks(range(rows), row_labels)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.tick_params(length=0)
    bar = fig.colorbar(image, ax=ax, shrink=0.85)
    bar.set_label(units + (" (log scale)" if isinstance(norm, LogNorm) else ""))
    # invisible markers at cell centres carry the hover text
    yy, xx = np.mgrid[0:rows, 0:cols]
    cells = ax.scatter(xx.ravel(), yy.ravel(), s=(72 * size / max(rows, cols)) ** 2 * 0.5, marker="s",
                       color="none", edgecolor="none")
    cells.set_gid("cells")
    texts = [f"{row_labels[r]} → {col_labels[c]}: {_number(m[r, c])} {units}" for r, c in zip(yy.ravel(), xx.ravel())]
    if annotate is None:
        annotate = rows * cols <= 120
    if annotate:
        for r in range(rows):
            for c in range(cols):
                if np.isfinite(m[r, c]):
                    level = norm(m[r, c]) if not (log and m[r, c] <= 0) else 0
                    ax.text(c, r, _number(m[r, c], short=True), ha="center", va="center",
                            fontsize=style.FONT_SIZE - 2.5, color=style.PAPER if level < 0.55 else style.INK)
    return _svg(fig, name, {"cells": texts})


def _number(value, short=False):
    if not np.isfinite(value):
        return "∞" if value > 0 else "n/a"
    if short:
        return f"{value:.2g}" if abs(value) < 0.01 and value != 0 else f"{value:.3g}"
    return f"{value:.4g}"


@_styled
def ranked_bars(labels, values, *, xlabel, name, highlight=3):
    """Horizontal bars, largest first; the top ``highlight`` bars in the accent colour."""
    values = np.asarray(values, dtype=float)
    n = len(values)
    fig = _figure(height_ratio=min(0.14 + 0.034 * n, 1.2))
    ax = fig.add_subplot()
    colours = [style.ACCENT if i < highlight else style.MUTED for i in range(n)]
    bars = ax.barh(np.arange(n), values, color=colours, height=0.72)
    ax.set_yticks(np.arange(n), labels)
    ax.invert_yaxis()
    ax.set_xlabel(xlabel)
    ax.grid(True, axis="x")
    ax.tick_params(axis="y", length=0)
    for spine in ("top", "right"):
        ax.spines[spine].set_visible(False)
    return _svg(fig, name)


@_styled
def estimates_with_errors(labels, simulated, standard_error, exact, *, ylabel, name):
    """Simulated minus exact values with 95% intervals (1.96 standard errors) around them.

    A walk simulation agrees with the exact solve when about 95% of the
    intervals cross zero. Hovering a mark gives both values.
    """
    simulated, se, exact = (np.asarray(v, dtype=float) for v in (simulated, standard_error, exact))
    n = len(labels)
    fig = _figure(height_ratio=0.5)
    ax = fig.add_subplot()
    x = np.arange(n)
    difference = simulated - exact
    ax.axhline(0.0, color=style.INK, linewidth=0.8)
    ax.errorbar(x, difference, yerr=1.96 * se, fmt="none", ecolor=style.ACCENT, elinewidth=1.2, capsize=2.5)
    marks = ax.scatter(x, difference, s=18, color=style.ACCENT, edgecolor=style.INK, linewidth=0.4, zorder=3)
    marks.set_gid("differences")
    ax.set_xticks(x, labels, rotation=90 if n > 6 else 0)
    ax.set_ylabel(ylabel)
    ax.set_xlabel("release patch → outcome")
    ax.grid(True, axis="y")
    inside = int(np.sum(np.abs(difference) <= 1.96 * se))
    ax.set_title(f"{inside} of {n} differences lie within 1.96 standard errors", fontsize=style.FONT_SIZE, loc="left",
                 fontweight="normal")
    texts = [f"{lab}: exact {e:.4g}, simulated {s:.4g} ± {1.96 * q:.2g}" for lab, e, s, q in
             zip(labels, exact, simulated, se)]
    return _svg(fig, name, {"differences": texts})


@_styled
def timeline(stages, *, name="timeline"):
    """The run's stages as bars on a time axis (seconds since the run started); nested stages sit inside
    the analysis that ran them."""
    from matplotlib.patches import Rectangle
    stages = sorted(stages, key=lambda s: (s["start"], -s["end"]))
    n = len(stages)
    nested = [any(o is not s and o["start"] <= s["start"] and s["end"] <= o["end"] and
                  (o["end"] - o["start"]) > (s["end"] - s["start"]) for o in stages) for s in stages]
    fig = _figure(height_ratio=min(0.14 + 0.034 * n, 1.2))
    ax = fig.add_subplot()
    end = max((s["end"] for s in stages), default=1.0) or 1.0
    for i, s in enumerate(stages):
        rect = Rectangle((s["start"], i - 0.36), max(s["end"] - s["start"], end * 0.002), 0.72,
                         color=style.MUTED if nested[i] else style.ACCENT)
        ax.add_patch(rect)
        ax.text(s["end"] + end * 0.01, i, f"{s['end'] - s['start']:.2f} s", va="center",
                fontsize=style.FONT_SIZE - 1.5, color=style.MUTED)
    ax.set_xlim(0, end * 1.12)
    ax.set_ylim(n - 0.5, -0.5)
    ax.set_yticks(range(n), [("· " if inner else "") + s["stage"].replace("_", " ")
                             for s, inner in zip(stages, nested)])
    ax.set_xlabel("seconds since the run started")
    ax.grid(True, axis="x")
    ax.tick_params(axis="y", length=0)
    for spine in ("top", "right"):
        ax.spines[spine].set_visible(False)
    return _svg(fig, name)
