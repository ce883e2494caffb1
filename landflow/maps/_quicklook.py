"""Quick-look maps of one raster layer, with the palette its quantity calls for."""

from __future__ import annotations

import textwrap

import numpy as np

from . import style
from ._frame import MapGeometry, block_reduce, draw_patches, finish_map, new_map

__all__ = ["KINDS", "quicklook", "render_quicklook", "colour_scale"]

#: The kinds of quantity a quick-look can show, and how each is coloured.
KINDS = {
    "magnitude": "sequential palette, linear scale from the 1st to the 99.9th percentile",
    "log": "sequential palette on a log scale (values <= 0 take the lowest colour)",
    "probability": "sequential palette over the fixed range 0 to 1",
    "change": "diverging palette centred on zero, symmetric limits",
    "ratio": "diverging palette centred on 1 on a log scale, limits symmetric in the log (1/4 and 4 alike)",
    "classes": "qualitative palette with a discrete legend (patch ids, destinations)",
    "count": "sequential palette sampled at whole numbers with a discrete legend; 0 is left clear",
}


def colour_scale(values, kind, *, classes=None):
    """The colour map, norm and colour-bar ticks for ``values`` of a given kind.

    Returns ``(cmap, norm, ticks, extend)``; ``ticks`` is None for automatic
    ticks. For ``"change"`` the norm maps 0 to the palette's middle (0.5)
    exactly; for ``"count"`` and ``"classes"`` every whole number gets its own
    colour band.
    """
    import matplotlib
    from matplotlib.colors import BoundaryNorm, ListedColormap, LogNorm, Normalize, SymLogNorm
    from matplotlib.ticker import LogLocator, MaxNLocator

    if kind not in KINDS:
        raise ValueError(f"unknown quick-look kind {kind!r}; use one of {', '.join(KINDS)}")
    finite = np.asarray(values, dtype=float)
    finite = finite[np.isfinite(finite)]
    if kind == "probability":
        return matplotlib.colormaps[style.PROBABILITY], Normalize(0.0, 1.0), None, "neither"
    if kind == "classes":
        found = np.unique(finite) if classes is None else np.asarray(sorted(classes), dtype=float)
        found = found if found.size else np.array([0.0])
        colours = [style.QUALITATIVE[i % len(style.QUALITATIVE)] for i in range(found.size)]
        cmap = ListedColormap(colours)
        edges = np.concatenate([found - 0.5, [found[-1] + 0.5]])
        # BoundaryNorm needs increasing edges: classes are whole numbers, so 0.5 either side never overlaps
        return cmap, BoundaryNorm(edges, cmap.N), found, "neither"
    if kind == "count":
        top = int(max(1, np.nanmax(finite))) if finite.size else 1
        if top <= 12:
            edges = np.arange(0.5, top + 1.0)
            ticks = np.arange(1, top + 1)
        else:
            ticks = MaxNLocator(nbins=8, integer=True).tick_values(1, top)
            ticks = ticks[(ticks >= 1) & (ticks <= top)]
            edges = np.arange(0.5, top + 1.0)
        base = matplotlib.colormaps[style.SEQUENTIAL]
        n = edges.size - 1
        cmap = ListedColormap([base(0.15 + 0.85 * i / max(n - 1, 1)) for i in range(n)])
        return cmap, BoundaryNorm(edges, cmap.N), ticks, "neither"
    cmap = matplotlib.colormaps[style.DIVERGING if kind == "change" else style.SEQUENTIAL]
    if kind == "change":
        # symmetric limits and a symmetric-log stretch: 0 sits at the palette's light middle, and both the
        # large change where the landscape changed and the small ones it causes far away stay visible
        bound = float(np.percentile(np.abs(finite), 99.9)) if finite.size else 1.0
        bound = bound if bound > 0 else 1.0
        extend = "both" if finite.size and np.abs(finite).max() > bound else "neither"
        top = _round_down(bound)
        ticks = np.array([-top, -top / 10, -top / 100, 0.0, top / 100, top / 10, top])
        return cmap, SymLogNorm(linthresh=bound / 100, vmin=-bound, vmax=bound, base=10), ticks, extend
    if kind == "ratio":
        positive = finite[finite > 0]
        if positive.size:
            lo, hi = np.percentile(positive, [0.5, 99.5])
            bound = float(max(hi, 1.0 / lo))
            if bound > 1.0:
                # ticks at 1 and at powers of 2 (or 10 over a wide range) either side, symmetric in the log
                step = 2.0 if bound < 64 else 10.0
                n = max(1, int(np.floor(np.log(bound) / np.log(step) + 1e-9)))
                ticks = step ** np.arange(-n, n + 1, dtype=float)
                extend = "both" if positive.min() < 1 / bound or positive.max() > bound else "neither"
                return (matplotlib.colormaps[style.DIVERGING], LogNorm(1.0 / bound, bound, clip=False), ticks,
                        extend)
        kind = "magnitude"
    if kind == "log":
        positive = finite[finite > 0]
        if positive.size:
            lo, hi = np.percentile(positive, [1, 99.9])
            if hi > lo > 0:
                decades = np.log10(hi / lo)
                # at most about 10 ticks: powers of ten over many decades, 1-2-5 over a few, 1 to 9 within one
                subs = (1.0,) if decades > 3 else (1.0, 2.0, 5.0) if decades > 1 else np.arange(1.0, 10.0)
                ticks = LogLocator(base=10, subs=subs).tick_values(lo, hi)
                ticks = ticks[(ticks >= lo) & (ticks <= hi)]
                if ticks.size < 3:  # under a decade: round linear steps read better than powers of ten
                    ticks = MaxNLocator(nbins=5).tick_values(lo, hi)
                    ticks = ticks[(ticks >= lo) & (ticks <= hi)]
                extend = "both" if finite.min() < lo or finite.max() > hi else "neither"
                return cmap, LogNorm(lo, hi, clip=False), ticks, extend
        kind = "magnitude"  # nothing positive to put on a log scale, or all one value
    lo, hi = np.percentile(finite, [1, 99.9]) if finite.size else (0.0, 1.0)
    if not hi > lo:
        lo, hi = (lo - 0.5, hi + 0.5) if lo == hi else (0.0, 1.0)
    extend = "both" if finite.size and (finite.min() < lo or finite.max() > hi) else "neither"
    return cmap, Normalize(lo, hi), None, extend


def _colours_apart(values, classes):
    """Palette colours for more classes than colours, such that classes sharing a border never share a colour.

    Greedy colouring of the classes' adjacency graph (cells side by side), classes in
    order, each taking the least used colour its earlier neighbours left free; a class
    whose neighbours use every colour takes the one they use least.
    """
    palette = list(style.QUALITATIVE)
    index = {float(v): i for i, v in enumerate(classes)}
    neighbours = [set() for _ in classes]
    for a, b in ((values[:, :-1], values[:, 1:]), (values[:-1, :], values[1:, :])):
        pairs = np.stack([a.ravel(), b.ravel()], axis=1)
        pairs = pairs[np.isfinite(pairs).all(axis=1) & (pairs[:, 0] != pairs[:, 1])]
        for x, y in np.unique(pairs, axis=0):
            if x in index and y in index:
                neighbours[index[x]].add(index[y])
                neighbours[index[y]].add(index[x])
    chosen = []
    for i in range(len(classes)):
        taken = [chosen[j] for j in neighbours[i] if j < i]
        free = [k for k in range(len(palette)) if k not in taken]
        chosen.append(min(free, key=lambda k: (chosen.count(k), k)) if free else
                      min(range(len(palette)), key=taken.count))
    return [palette[k] for k in chosen]


def _round_down(value):
    """The largest number with one significant digit not above ``value`` (> 0)."""
    power = 10.0 ** np.floor(np.log10(value))
    return float(np.floor(value / power * (1 + 1e-12)) * power)


def ratio_labels(ticks):
    """Labels of a ratio bar: 1/4, 1/2, 1, 2, 4 (fractions below 1, so both sides read alike)."""
    return [f"1/{_format_tick(1.0 / t)}" if 0 < t < 1 else _format_tick(t) for t in np.asarray(ticks, dtype=float)]


def tick_labels(ticks):
    """Labels for a colour bar's ticks, all in one notation: plain numbers (thin-space thousands) when every
    tick lies between 1e-3 and 1e7, else powers of ten for all of them, so that "9 000 000" never stands
    beside "1e7"."""
    ticks = np.asarray(ticks, dtype=float)
    nonzero = np.abs(ticks[ticks != 0])
    plain = nonzero.size == 0 or (nonzero.min() >= 1e-3 and nonzero.max() < 1e7)
    return [_format_tick(t, plain) for t in ticks]


def _format_tick(value, plain=True):
    if value == 0:
        return "0"
    if plain and float(value).is_integer():
        return f"{value:,.0f}".replace(",", "\u2009")
    if plain:
        return f"{value:,.6g}".replace(",", "\u2009")
    exponent = int(np.floor(np.log10(abs(value))))
    mantissa = float(f"{value / 10.0 ** exponent:.2g}")
    if abs(mantissa) >= 10:  # rounding carried into the next power
        mantissa, exponent = mantissa / 10, exponent + 1
    return f"{mantissa:g}e{exponent}"


def render_quicklook(array, geometry, *, kind="magnitude", title="", units="", patches=None, patch_names=None,
                     landscape=None, backdrop=None, marks=None, mark_label="changed", class_names=None,
                     class_colours=None):
    """Draw one layer as a map and return the matplotlib Figure.

    Parameters
    ----------
    array : ndarray, shape (rows, cols)
        The layer; NaN where it has no value.
    geometry : MapGeometry
        Where the grid lies (map coordinates, CRS).
    kind : str
        One of :data:`KINDS`.
    title, units : str
        Map title and the colour bar's unit label.
    patches : ndarray of int, optional
        Patch raster (0 = none): outlined and labelled.
    patch_names : dict, optional
        Label text per patch id (default: the id).
    landscape : ndarray of bool, optional
        Cells inside the landscape; the others are drawn as nodata (hatched
        neutral grey). Default: the finite cells of ``array``.
    backdrop : ndarray, optional
        Resistance drawn as a faint grey under the layer (for sparse layers:
        routes, corridors, pinch points); the layer's NaN cells and, for
        counts, zeros let it show through.
    marks : ndarray of bool, optional
        Cells to outline in the mark colour (where a what-if changed the landscape).
    class_names : dict, optional
        Legend text per class value for ``kind="classes"`` (default: the value).
    class_colours : dict, optional
        Colour per class value, overriding the qualitative palette (for classes
        with an order of importance, such as corridor and pinch point).

    Notes
    -----
    Grids of more than :data:`style.MAX_MAP_PIXELS` cells are drawn from a
    block-reduced copy (:func:`block_reduce`: the maximum for counts, classes
    sampled, the mean otherwise), so time and memory stay bounded.
    """
    import matplotlib
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch

    with matplotlib.rc_context(style.matplotlib_style()):
        data = np.asarray(array, dtype=float)
        inside = np.isfinite(data) if landscape is None else np.asarray(landscape, dtype=bool)
        factor = max(1, int(np.ceil(np.sqrt(data.size / style.MAX_MAP_PIXELS))))
        if factor > 1:
            data = block_reduce(data, factor, how="max" if kind == "count" else
                                "first" if kind == "classes" else "mean")
            inside = block_reduce(inside, factor, how="max") > 0          # strip by strip: no full-size copy
            backdrop = None if backdrop is None else block_reduce(backdrop, factor, how="mean")
            marks = None if marks is None else block_reduce(np.asarray(marks), factor, how="max") > 0
        shown = geometry.reduced(factor) if factor > 1 else geometry
        fig, ax = new_map(shown, title=title)
        extent = shown.extent
        draw = dict(extent=extent, interpolation="nearest", origin="upper")
        handles = []
        outside = ~inside
        if outside.any():
            xs, ys = shown.cell_centres(np.arange(data.shape[0]), np.arange(data.shape[1]))
            ax.imshow(np.where(outside, 1.0, np.nan), cmap=ListedColormap([style.NODATA]), vmin=0, vmax=1,
                      zorder=1, **draw)
            if outside.shape[0] > 1 and outside.shape[1] > 1:
                hatch = ax.contourf(xs, ys, outside.astype(float), levels=[0.5, 1.5], colors="none",
                                    hatches=["////"], zorder=2)
                hatch.set_edgecolor(style.NODATA_HATCH)
                hatch.set_linewidth(0)
            handles.append(Patch(facecolor=style.NODATA, edgecolor=style.NODATA_HATCH, hatch="////",
                                 label="no data (outside the landscape)"))
        values = np.where(inside, data, np.nan)
        if kind == "count":
            values = np.where(values > 0, values, np.nan)
        if backdrop is not None:
            grey = np.where(inside, np.asarray(backdrop, dtype=float), np.nan)
            positive = grey[np.isfinite(grey) & (grey > 0)]
            if positive.size:
                lo, hi = np.percentile(positive, [2, 98])
                shade = np.log(np.clip(grey, lo, hi) / lo) / np.log(hi / lo) if hi > lo else np.zeros_like(grey)
                a, b = style.BACKDROP_RANGE
                ax.imshow(a + (b - a) * shade, cmap=style.BACKDROP, vmin=0, vmax=1, zorder=3, **draw)
                handles.append(Patch(facecolor="#bdbdbd", edgecolor="none",
                                     label="resistance (grey: darker is harder to cross)"))
        cmap, norm, ticks, extend = colour_scale(values, kind, classes=(class_names or None) and class_names.keys())
        if kind == "classes" and class_colours:
            cmap = ListedColormap([class_colours.get(int(v), cmap(i)) for i, v in enumerate(ticks)])
        elif kind == "classes" and len(ticks) > len(style.QUALITATIVE):
            cmap = ListedColormap(_colours_apart(values, ticks))
        image = ax.imshow(np.ma.masked_invalid(values), cmap=cmap, norm=norm, zorder=4, **draw)
        shown_cells = np.isfinite(values)
        if kind in ("count", "classes") and backdrop is not None and 0 < shown_cells.sum() < 0.002 * values.size:
            # a handful of cells would vanish at print size: ring each one
            rr, cc = np.nonzero(shown_cells)
            xs, ys = shown.cell_centres(rr, cc)
            ax.scatter(xs, ys, s=42, facecolor="none", edgecolor=[cmap(norm(v)) for v in values[rr, cc]],
                       linewidth=1.1, zorder=5)
        label = units + (" (log scale)" if kind == "log" and norm.__class__.__name__ == "LogNorm" else
                         " (log scale either side of a linear band around 0)" if kind == "change" else "")
        if kind == "classes":
            names = class_names or {}
            present = ticks if class_names else np.unique(values[np.isfinite(values)])
            colours = {float(v): cmap(norm(v)) for v in ticks}
            legend = [Patch(facecolor=colours.get(float(v), style.MUTED), edgecolor=style.INK, linewidth=0.3,
                            label=str(names.get(int(v), f"{int(v)}" if float(v).is_integer() else f"{v:g}")))
                      for v in present]
            if legend:
                ax.legend(handles=legend, title=textwrap.fill(units, 24), loc="upper left",
                          bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0, fontsize=style.FONT_SIZE - 1,
                          ncols=1 if len(legend) <= 16 else 2)
        else:
            bar = fig.colorbar(image, ax=ax, shrink=0.9, extend=extend, ticks=ticks, aspect=30, pad=0.02)
            bar.set_label(textwrap.fill(label, 42))
            bar.outline.set_linewidth(0.5)
            if kind in ("log", "change", "ratio") and ticks is not None:
                bar.ax.minorticks_off()
                bar.set_ticks(ticks, labels=ratio_labels(ticks) if kind == "ratio" else tick_labels(ticks))
            elif kind == "count":
                bar.set_ticks(ticks, labels=[str(int(t)) for t in ticks])
                bar.ax.minorticks_off()
        if marks is not None and np.asarray(marks).any():
            marked = np.asarray(marks, dtype=float)
            if marked.shape[0] > 1 and marked.shape[1] > 1:
                xs, ys = shown.cell_centres(np.arange(marked.shape[0]), np.arange(marked.shape[1]))
                ax.contour(xs, ys, marked, levels=[0.5], colors=[style.CHANGE_MARK], linewidths=1.6, zorder=12)
            else:
                ax.imshow(np.where(marked > 0, 1.0, np.nan), cmap=ListedColormap([style.CHANGE_MARK]), zorder=12,
                          **draw)
            from matplotlib.lines import Line2D
            handles.append(Line2D([], [], color=style.CHANGE_MARK, linewidth=1.6, label=mark_label))
        if patches is not None and (np.asarray(patches) > 0).any():
            from matplotlib.lines import Line2D
            handles.append(Line2D([], [], color=style.PATCH_EDGE, linewidth=0.9, label="patch (labelled by id)"))
        if handles:
            fig.legend(handles=handles, loc="outside lower center", ncols=min(len(handles), 3),
                       fontsize=style.FONT_SIZE - 1, handlelength=1.6)
        if factor > 1:
            ax.text(0.01, 0.99, f"drawn from blocks of {factor} x {factor} cells", transform=ax.transAxes,
                    ha="left", va="top", fontsize=style.FONT_SIZE - 2, color=style.MUTED, zorder=22)
        finish_map(ax, shown)
        if patches is not None:
            draw_patches(ax, patches, geometry, names=patch_names, factor=factor)
        ax.landflow_geometry = shown
    return fig


def quicklook(path, array, geometry=None, **options):
    """Save :func:`render_quicklook`'s map of ``array`` as a PNG at ``path`` (written atomically).

    Without ``geometry`` the grid is drawn with unit cells in "map units".
    """
    from ..io._atomic import atomic_path
    if geometry is None:
        geometry = MapGeometry.from_cells(np.shape(array))
    fig = render_quicklook(array, geometry, **options)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png")
    return path
