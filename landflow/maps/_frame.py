"""A map frame any landflow picture can draw in: map coordinates with units, a coordinate grid,
scale bar, north arrow, the CRS named in a corner, and patch outlines with labels that do not collide."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from . import style

__all__ = ["MapGeometry", "scale_bar_length", "place_labels", "patch_anchors", "block_reduce",
           "new_map", "draw_scale_bar", "draw_north_arrow", "draw_crs", "draw_patches", "finish_map"]

_UNIT_WORDS = {"metre": "m", "meter": "m", "m": "m", "us survey foot": "US ft", "foot": "ft", "ft": "ft",
               "kilometre": "km", "km": "km"}


@dataclass(frozen=True)
class MapGeometry:
    """Where a grid lies on the map: enough to draw it in map coordinates.

    Parameters
    ----------
    transform : sequence of 6 floats
        The affine ``(a, b, c, d, e, f)`` of the grid: map coordinates of the
        upper-left corner of cell (row, col) are ``(c + a * col, f + e * row)``
        (north-up: ``b = d = 0``, ``e < 0``).
    shape : (int, int)
        Rows and columns.
    crs_label : str or None
        How the CRS is named in the map's corner (``"EPSG:25832 · ETRS89 / UTM zone 32N"``), or None.
    units : str
        Unit of the map coordinates (``"m"``, ``"ft"``, ``"°"`` or ``"map units"``).
    geographic : bool
        True for longitude/latitude coordinates (no scale bar is drawn: a degree has no fixed length).
    """

    transform: tuple
    shape: tuple
    crs_label: str | None = None
    units: str = "map units"
    geographic: bool = False

    @classmethod
    def from_grid(cls, grid, shape=None):
        """The geometry of a :class:`landflow.grid.Grid` (its transform and CRS)."""
        t = grid.transform
        crs_label, units, geographic = describe_crs(grid.crs)
        return cls(tuple(float(v) for v in (t.a, t.b, t.c, t.d, t.e, t.f)), tuple(shape or grid.shape),
                   crs_label, units, geographic)

    @classmethod
    def from_cells(cls, shape, cell_size=1.0, origin=(0.0, 0.0), crs_label=None, units="map units"):
        """A geometry from a cell size and the upper-left corner (for pictures drawn from plain arrays)."""
        return cls((float(cell_size), 0.0, float(origin[0]), 0.0, -float(cell_size), float(origin[1])),
                   tuple(shape), crs_label, units, False)

    @property
    def extent(self):
        """(left, right, bottom, top) in map units, as ``imshow`` wants it."""
        a, _, c, _, e, f = self.transform
        rows, cols = self.shape
        xs = sorted((c, c + a * cols))
        ys = sorted((f, f + e * rows))
        return xs[0], xs[1], ys[0], ys[1]

    def cell_centres(self, rows, cols):
        """Map coordinates (x, y) of the centres of cells (rows, cols)."""
        a, _, c, _, e, f = self.transform
        return c + a * (np.asarray(cols) + 0.5), f + e * (np.asarray(rows) + 0.5)

    def reduced(self, factor):
        """The geometry of the same area drawn with cells ``factor`` times larger (see :func:`block_reduce`)."""
        a, b, c, d, e, f = self.transform
        rows, cols = self.shape
        return MapGeometry((a * factor, b, c, d, e * factor, f), (-(-rows // factor), -(-cols // factor)),
                           self.crs_label, self.units, self.geographic)


def describe_crs(crs):
    """(label, units, geographic) of a CRS object as rasterio gives it (duck-typed), or of None."""
    if crs is None:
        return None, "map units", False
    epsg = None
    try:
        epsg = crs.to_epsg()
    except Exception:  # an unusual CRS may not resolve to a code; the name still helps
        pass
    name = None
    try:
        match = re.match(r'\s*[A-Z_]+\["([^"]+)"', crs.to_wkt())
        name = match.group(1) if match else None
    except Exception:
        pass
    label = " · ".join(s for s in (f"EPSG:{epsg}" if epsg else None, name) if s) or str(crs)
    geographic = bool(getattr(crs, "is_geographic", False))
    if geographic:
        return label, "°", True
    unit = str(getattr(crs, "linear_units", "") or "").lower()
    return label, _UNIT_WORDS.get(unit, unit or "map units"), False


def scale_bar_length(width, fraction=0.25):
    """The longest round length (1, 2 or 5 times a power of ten) no longer than ``fraction * width``.

    >>> scale_bar_length(8000.0)
    2000.0
    >>> scale_bar_length(30.0)
    5.0
    """
    target = fraction * float(width)
    if not (target > 0 and math.isfinite(target)):
        raise ValueError(f"a scale bar needs a positive, finite map width; got {width!r}")
    power = 10.0 ** math.floor(math.log10(target))
    for step in (5.0, 2.0, 1.0):
        if step * power <= target * (1 + 1e-12):
            return step * power
    return power  # pragma: no cover - step 1 always fits


def _length_text(length, units):
    if units == "m" and length >= 1000:
        return f"{length / 1000:g} km"
    return f"{length:g} {units}"


def place_labels(anchors, sizes, frame, *, gap=2.0, avoid=(), first_ring=0):
    """Place label boxes near their anchors, inside a frame, without overlapping one another.

    A greedy search (common practice in cartographic label placement): each
    label, in the given order, tries its anchor first, then rings of eight
    positions further and further out, and takes the first position whose box
    lies inside the frame and overlaps neither a label already placed nor a
    box in ``avoid``. When none is free it takes the free-est position, moved
    inside the frame. Cost O(k^2) for k labels.

    Parameters
    ----------
    anchors : sequence of (x, y)
        Where each label belongs (display units, y up).
    sizes : sequence of (width, height)
        Each label's box size in the same units.
    frame : (x0, y0, x1, y1)
        The box every label must lie in.
    gap : float
        Space kept between boxes.
    first_ring : int
        1 to start beside the anchor rather than on it (keeps small features visible).
    avoid : sequence of (x0, y0, x1, y1)
        Boxes no label should cover (scale bar, north arrow).

    Returns
    -------
    list of (x, y)
        The centre of each label's box; always inside the frame when the box fits.
    """
    x0, y0, x1, y1 = frame
    placed = [tuple(b) for b in avoid]
    out = []
    for (ax_, ay), (w, h) in zip(anchors, sizes):
        step = max(h, 1.0) + gap
        best, best_cost = None, None
        for ring in range(first_ring, first_ring + 9):
            directions = [(0.0, 0.0)] if ring == 0 else [
                (math.cos(k * math.pi / 4), math.sin(k * math.pi / 4)) for k in (1, 0, 2, 3, 7, 4, 6, 5)]
            for dx, dy in directions:
                cx = ax_ + dx * ring * step * max(1.0, w / (2 * step) if dx else 1.0)
                cy = ay + dy * ring * step
                cx = min(max(cx, x0 + w / 2), x1 - w / 2) if x1 - x0 >= w else (x0 + x1) / 2
                cy = min(max(cy, y0 + h / 2), y1 - h / 2) if y1 - y0 >= h else (y0 + y1) / 2
                box = (cx - w / 2 - gap, cy - h / 2 - gap, cx + w / 2 + gap, cy + h / 2 + gap)
                cost = sum(_overlap(box, other) for other in placed)
                if best_cost is None or cost < best_cost - 1e-9:
                    best, best_cost = (cx, cy), cost
                if cost == 0:
                    break
            if best_cost == 0:
                break
        cx, cy = best
        placed.append((cx - w / 2, cy - h / 2, cx + w / 2, cy + h / 2))
        out.append((cx, cy))
    return out


def _overlap(a, b):
    w = min(a[2], b[2]) - max(a[0], b[0])
    h = min(a[3], b[3]) - max(a[1], b[1])
    return w * h if w > 0 and h > 0 else 0.0


def patch_anchors(labels):
    """For every patch id > 0 in a label raster: (id, row, col) of the patch cell nearest its centroid.

    The anchor lies on the patch even for ring- or crescent-shaped patches. Uses
    the patches' bounding boxes (``scipy.ndimage.find_objects``), so the cost is
    one pass over the raster plus the patches' boxes.
    """
    from scipy import ndimage
    labels = np.asarray(labels)
    if labels.size == 0 or not (labels > 0).any():
        return []
    # patch rasters hold whole numbers >= 0: find_objects reads them as they are, without a full-size copy
    as_int = labels if labels.dtype.kind in "iu" else labels.astype(np.int64)
    out = []
    for index, box in enumerate(ndimage.find_objects(as_int), start=1):
        if box is None:
            continue
        rows, cols = np.nonzero(as_int[box] == index)
        rows, cols = rows + box[0].start, cols + box[1].start
        r, c = rows.mean(), cols.mean()
        k = int(np.argmin((rows - r) ** 2 + (cols - c) ** 2))
        out.append((index, int(rows[k]), int(cols[k])))
    return out


def block_reduce(array, factor, how="mean"):
    """Shrink a raster by whole blocks of ``factor`` x ``factor`` cells, a strip of rows at a time.

    ``how`` is ``"mean"`` (NaN-aware, for continuous values), ``"max"`` (keeps thin
    features such as routes and pinch points visible) or ``"first"`` (the
    upper-left cell of each block, for classes). Extra memory is one strip of
    ``factor`` rows, so a map of a very large grid costs little more than the
    grid itself.
    """
    array = np.asarray(array)
    if factor <= 1:
        return array
    rows, cols = array.shape
    if how == "first":
        return array[::factor, ::factor]
    out_rows, out_cols = -(-rows // factor), -(-cols // factor)
    out = np.full((out_rows, out_cols), np.nan)
    reducer = np.nanmean if how == "mean" else np.nanmax
    import warnings
    for i in range(out_rows):
        strip = np.asarray(array[i * factor:(i + 1) * factor], dtype=float)
        pad_r, pad_c = factor - strip.shape[0], out_cols * factor - cols
        if pad_r or pad_c:
            strip = np.pad(strip, ((0, pad_r), (0, pad_c)), constant_values=np.nan)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN blocks stay NaN
            out[i] = reducer(strip.reshape(factor, out_cols, factor), axis=(0, 2))
    return out


def new_map(geometry, *, title="", width=None, height_limits=(2.8, 9.0)):
    """A figure and axes framed for ``geometry``: map coordinates with units, a faint coordinate grid.

    Returns ``(fig, ax)``; draw with ``extent=geometry.extent`` (or in map
    coordinates), then call :func:`finish_map`. Uses a Figure of its own, not
    pyplot's global state, so runs sharing a process (threads) are safe.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import FixedLocator, FuncFormatter, MaxNLocator

    left, right, bottom, top = geometry.extent
    width = width or style.MAP_WIDTH_INCHES
    ratio = (top - bottom) / (right - left)
    stretched = ratio > 4 or ratio < 1 / 6   # strips one or a few cells wide: not drawn to a common scale
    map_height = width * 0.78 * (min(max(ratio, 1 / 6), 4) if not stretched else (0.35 if ratio < 1 else 3))
    height = min(max(map_height + 1.3, height_limits[0]), height_limits[1])
    fig = Figure(figsize=(width, height), dpi=style.MAP_DPI, layout="constrained")
    FigureCanvasAgg(fig)  # a canvas of its own, to measure label sizes before saving
    ax = fig.add_subplot()
    ax.set_xlim(left, right)
    ax.set_ylim(bottom, top)
    ax.set_aspect("auto" if stretched else "equal")
    ax.set_facecolor(style.PAPER)
    fmt = FuncFormatter(lambda v, _: f"{v:,.0f}".replace(",", "\u2009") if abs(v) >= 100 else f"{v:g}")
    for axis, long_side, middle in ((ax.xaxis, ratio <= 1, (left + right) / 2), (ax.yaxis, ratio >= 1, (bottom + top) / 2)):
        # the short side of a strip gets one tick, at its middle, so that labels never pile up
        axis.set_major_locator(MaxNLocator(5) if long_side or not stretched else FixedLocator([middle]))
        axis.set_major_formatter(fmt)
    ax.tick_params(axis="y", labelrotation=90)
    for label in ax.get_yticklabels():
        label.set_verticalalignment("center")
    words = ("longitude", "latitude") if geometry.geographic else ("easting", "northing")
    ax.set_xlabel(f"{words[0]} ({geometry.units})")
    ax.set_ylabel(f"{words[1]} ({geometry.units})")
    ax.grid(True, zorder=5)
    if title:
        ax.set_title(title)
    ax.landflow_stretched = stretched
    return fig, ax


def _halo(width=2.2):
    from matplotlib import patheffects
    return [patheffects.withStroke(linewidth=width, foreground=style.PAPER)]


def draw_scale_bar(ax, geometry):
    """A two-part scale bar in the lower left; returns its length in map units (None for degrees)."""
    if geometry.geographic:
        return None
    from matplotlib.patches import Rectangle
    left, right, bottom, top = geometry.extent
    length = scale_bar_length(right - left)
    x = left + 0.04 * (right - left)
    # the bar's thickness in axes units, so it looks the same on any map shape
    trans = ax.get_xaxis_transform()
    y, h = 0.05, 0.018
    ax.add_patch(Rectangle((x - 0.01 * (right - left), y - 0.015), length + 0.02 * (right - left), h + 0.075,
                           transform=trans, facecolor=style.PAPER, edgecolor="none", alpha=0.8, zorder=20))
    for k in range(2):
        ax.add_patch(Rectangle((x + k * length / 2, y), length / 2, h, transform=trans, zorder=21,
                               facecolor=style.INK if k == 0 else style.PAPER, edgecolor=style.INK, linewidth=0.6))
    text = _length_text(length, geometry.units)
    if getattr(ax, "landflow_stretched", False):
        text += " (across)"
    ax.text(x + length / 2, y + h + 0.012, text, transform=trans, ha="center", va="bottom",
            fontsize=style.FONT_SIZE - 1, zorder=22)
    ax.landflow_scale_bar = (x, x + length)
    return length


def draw_north_arrow(ax):
    """A north arrow in the upper right (grids are north-up: see :class:`landflow.grid.Grid`)."""
    from matplotlib.patches import FancyBboxPatch
    ax.add_patch(FancyBboxPatch((0.925, 0.765), 0.06, 0.19, boxstyle="round,pad=0.005", transform=ax.transAxes,
                                facecolor=style.PAPER, edgecolor="none", alpha=0.8, zorder=21))
    ax.annotate("N", xy=(0.955, 0.93), xytext=(0.955, 0.80), xycoords="axes fraction", ha="center", va="center",
                fontsize=style.FONT_SIZE + 1, fontweight="bold", zorder=22, path_effects=_halo(),
                arrowprops={"arrowstyle": "-|>,head_width=0.35,head_length=0.7", "color": style.INK,
                            "linewidth": 1.2, "shrinkA": 6, "shrinkB": 0})


def draw_crs(ax, geometry):
    """The CRS named in the lower right corner."""
    text = geometry.crs_label or "no CRS: coordinates in map units"
    ax.text(0.99, 0.015, text, transform=ax.transAxes, ha="right", va="bottom", fontsize=style.FONT_SIZE - 1.5,
            color=style.INK, zorder=22, path_effects=_halo())


def draw_patches(ax, labels, geometry, *, names=None, factor=1):
    """Outline every patch and label it by its id (or ``names[id]``) without collisions.

    ``labels`` is the full-resolution patch raster (ints, 0 = none); with a
    reduced drawing (``factor`` > 1) outlines come from a reduced copy and the
    anchors from the full raster. Returns the placed labels as
    ``[(id, text, x, y)]`` in map coordinates.
    """
    labels = np.asarray(labels)
    if labels.size == 0 or not (labels > 0).any():
        return []
    occupied = block_reduce(labels, factor, how="max") > 0 if factor > 1 else (labels > 0)
    small = geometry.reduced(factor) if factor > 1 else geometry
    rows, cols = occupied.shape
    if rows > 1 and cols > 1:
        xs, ys = small.cell_centres(np.arange(rows), np.arange(cols))
        ax.contour(xs, ys, np.nan_to_num(occupied.astype(float)), levels=[0.5], colors=[style.PAPER],
                   linewidths=2.4, zorder=10)
        ax.contour(xs, ys, np.nan_to_num(occupied.astype(float)), levels=[0.5], colors=[style.PATCH_EDGE],
                   linewidths=0.9, zorder=11)
    else:  # a strip one cell wide: outline each patch cell as a box
        from matplotlib.patches import Rectangle
        a, _, c, _, e, f = small.transform
        for r, cc in zip(*np.nonzero(occupied > 0)):
            ax.add_patch(Rectangle((c + a * cc, f + e * (r + 1)), a, -e, fill=False, edgecolor=style.PATCH_EDGE,
                                   linewidth=0.9, zorder=11))
    return _label_patches(ax, labels, geometry, names or {})


def _label_patches(ax, labels, geometry, names):
    anchors = patch_anchors(labels)
    if not anchors:
        return []
    fig = ax.figure
    fig.draw_without_rendering()  # settle the layout, so positions measured now hold in the saved picture
    fig.set_layout_engine("none")  # and keep it: the labels go inside the axes, nothing else moves
    renderer = fig.canvas.get_renderer()
    texts, display, sizes = [], [], []
    for pid, r, c in anchors:
        x, y = geometry.cell_centres(r, c)
        text = ax.text(float(x), float(y), str(names.get(pid, pid)), ha="center", va="center",
                       fontsize=style.LABEL_FONT_SIZE, fontweight="bold", color=style.INK, zorder=30,
                       path_effects=_halo(2.6))
        bbox = text.get_window_extent(renderer)
        texts.append((pid, text, float(x), float(y)))
        display.append(tuple(ax.transData.transform((float(x), float(y)))))
        sizes.append((bbox.width, bbox.height))
    frame = ax.get_window_extent(renderer)
    avoid = [_display_box(ax, (0.0, 0.0, 0.42, 0.16)), _display_box(ax, (0.90, 0.72, 1.0, 1.0)),
             _display_box(ax, (0.55, 0.0, 1.0, 0.06))]
    centres = place_labels(display, sizes, (frame.x0, frame.y0, frame.x1, frame.y1), avoid=avoid, first_ring=1,
                           gap=1.5)
    inverse = ax.transData.inverted()
    placed = []
    for (pid, text, x, y), centre, anchor in zip(texts, centres, display):
        mx, my = inverse.transform(centre)
        text.set_position((mx, my))
        if math.hypot(centre[0] - anchor[0], centre[1] - anchor[1]) > 2.5 * max(sizes[0][1], 1.0):
            ax.annotate("", xy=(x, y), xytext=(mx, my), zorder=29,
                        arrowprops={"arrowstyle": "-", "color": style.INK, "linewidth": 0.6, "shrinkA": 5,
                                    "shrinkB": 1})
        placed.append((pid, text.get_text(), float(mx), float(my)))
    return placed


def _display_box(ax, fractions):
    x0, y0 = ax.transAxes.transform(fractions[:2])
    x1, y1 = ax.transAxes.transform(fractions[2:])
    return (x0, y0, x1, y1)


def finish_map(ax, geometry):
    """Scale bar, north arrow and CRS name: call once the map's layers are drawn."""
    if getattr(ax, "landflow_stretched", False):
        ax.set_aspect("auto")  # imshow sets an equal aspect; a strip one cell wide must stay readable
    length = draw_scale_bar(ax, geometry)
    draw_north_arrow(ax)
    draw_crs(ax, geometry)
    return length
