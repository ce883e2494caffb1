"""A network drawn in the map frame: edges with widths and colours by value, nodes coloured by value, zones
labelled."""

from __future__ import annotations

import textwrap

import numpy as np

from . import style
from ._frame import MapGeometry, _halo, describe_crs, finish_map, new_map
from ._quicklook import colour_scale, tick_labels

__all__ = ["network_map", "render_network_map"]


def _geometry(x, y, lines, crs):
    coords = np.concatenate([np.stack([x, y], axis=1), *[np.asarray(line)[:, :2] for line in lines]])
    left, bottom = np.nanmin(coords, axis=0)
    right, top = np.nanmax(coords, axis=0)
    pad = 0.06 * max(right - left, top - bottom, 1e-9)
    left, right, bottom, top = left - pad, right + pad, bottom - pad, top + pad
    label, units, geographic = describe_crs(crs)
    return MapGeometry((right - left, 0.0, left, 0.0, -(top - bottom), top), (1, 1), label, units, geographic)


def render_network_map(x, y, lines, *, node_values=None, edge_values=None, kind="magnitude", title="", units="",
                       zones=None, zone_names=None, crs=None, class_names=None,
                       marked_lines=None, mark_label="changed"):
    """A figure of a network in map coordinates.

    Parameters
    ----------
    x, y : arrays, one per node (map units)
    lines : list of (n, 2) arrays, one per edge
    edge_values : array, one per edge, optional
        Drawn as the edges' colours and widths (width grows with the square
        root of the value's share of the largest, for magnitudes and counts).
    node_values : array, one per node, optional
        Drawn as the nodes' colours (when no edge values are given).
    kind : one of :data:`landflow.maps.KINDS`
    marked_lines : list of (n, 2) arrays, optional
        Lines drawn dashed in the change colour and named ``mark_label`` in the legend (edges a what-if changed).
    zones : array of int, one per node (0 = none), optional
        Zone nodes are drawn as squares and each zone labelled by ``zone_names[id]``.
    """
    from matplotlib.collections import LineCollection
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    import matplotlib
    from matplotlib.cm import ScalarMappable

    geometry = _geometry(x, y, list(lines) + list(marked_lines or []), crs)
    with matplotlib.rc_context(style.matplotlib_style()):
        fig, ax = new_map(geometry, title=title)
        handles = []
        values = edge_values if edge_values is not None else node_values
        values = None if values is None else np.asarray(values, dtype=float)
        shown = values
        if values is not None and kind == "count":
            shown = np.where(values > 0, values, np.nan)
        if values is not None and kind in ("log", "magnitude") and np.isfinite(values).any():
            # rounding noise on dead ends (about 1e-16 of the largest value) is no current: leave it grey
            top = np.nanmax(np.abs(values))
            shown = np.where(np.abs(values) > 1e-9 * top, values, np.nan)
        cmap = norm = ticks = None
        if shown is not None:
            cmap, norm, ticks, extend = colour_scale(shown, kind, classes=(class_names or None) and class_names.keys())
        # thinner lines and no junction dots on a dense network, so that a map of 100 000 edges is still readable
        density = float(np.clip(np.sqrt(400.0 / max(len(lines), 1)), 0.12, 1.0))
        finite = None
        if edge_values is not None:
            finite = np.isfinite(shown) & ((shown > 0) if kind in ("log", "count") else np.isfinite(shown))
        # the plain network under the values: only the edges without a value, when edges carry the values
        plain = lines if finite is None else [line for line, f in zip(lines, finite) if not f]
        ax.add_collection(LineCollection(plain, colors=style.NODATA if finite is not None else style.MUTED,
                                         linewidths=0.7 * density, zorder=3, capstyle="round"))
        if edge_values is not None:
            top = np.nanmax(np.abs(shown[finite])) if finite.any() else 1.0
            share = np.abs(np.nan_to_num(shown)) / (top if top > 0 else 1.0)
            widths = density * (0.8 + 4.6 * np.sqrt(np.clip(share, 0.0, 1.0)) if kind != "probability"
                                else np.full(share.size, 2.0))
            order = np.argsort(share, kind="stable")            # the strongest edges on top
            order = order[finite[order]]
            colours = cmap(norm(shown[order]))
            ax.add_collection(LineCollection([lines[e] for e in order], colors=colours, linewidths=widths[order],
                                             zorder=4, capstyle="round"))
            handles.append(Line2D([], [], color=style.INK, linewidth=3.0, label="line width and colour: value per edge"))
            handles.append(Line2D([], [], color=style.NODATA, linewidth=1.0, label="0 (no flow, not used)"))
        node_colour = style.INK
        if node_values is not None and edge_values is None:
            finite = np.isfinite(shown)
            size = 26 * density**2
            ax.scatter(x[~finite], y[~finite], s=7 * density**2, color=style.NODATA, edgecolor=style.MUTED,
                       linewidth=0.3 * density, zorder=5)
            ax.scatter(x[finite], y[finite], s=size, c=shown[finite], cmap=cmap, norm=norm,
                       edgecolor=style.INK if density > 0.5 else "none", linewidth=0.35, zorder=6)
        elif density > 0.5:
            ax.scatter(x, y, s=4, color=node_colour, zorder=5, linewidth=0)
        if shown is not None:
            if kind == "classes":
                names = class_names or zone_names or {}
                present = ticks if class_names else np.unique(shown[np.isfinite(shown)])
                legend = [Patch(facecolor=cmap(norm(v)), edgecolor=style.INK, linewidth=0.3,
                                label=str(names.get(int(v), int(v)))) for v in present]
                if legend:
                    ax.legend(handles=legend, title=textwrap.fill(units, 24), loc="upper left",
                              bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0, fontsize=style.FONT_SIZE - 1)
            else:
                mappable = ScalarMappable(norm=norm, cmap=cmap)
                bar = fig.colorbar(mappable, ax=ax, shrink=0.9, extend=extend, ticks=ticks, aspect=30, pad=0.02)
                bar.set_label(textwrap.fill(units + (" (log scale)" if kind == "log" else
                                                     " (log scale either side of a linear band around 0)"
                                                     if kind == "change" else ""), 42))
                bar.outline.set_linewidth(0.5)
                if kind in ("log", "change", "ratio") and ticks is not None:
                    bar.ax.minorticks_off()
                    bar.set_ticks(ticks, labels=tick_labels(ticks))
                elif kind == "count" and ticks is not None:
                    bar.set_ticks(ticks, labels=[str(int(t)) for t in ticks])
                    bar.ax.minorticks_off()
        if marked_lines:
            ax.add_collection(LineCollection(marked_lines, colors=style.CHANGE_MARK, linewidths=2.4, zorder=5.5,
                                             linestyles=(0, (3, 1.5)), capstyle="round"))
            handles.append(Line2D([], [], color=style.CHANGE_MARK, linewidth=2.0, linestyle=(0, (3, 1.5)),
                                  label=mark_label))
        if zones is not None and (np.asarray(zones) > 0).any():
            zones = np.asarray(zones)
            inside = zones > 0
            ax.scatter(x[inside], y[inside], s=46, marker="s", facecolor=style.PAPER, edgecolor=style.PATCH_EDGE,
                       linewidth=1.2, zorder=7)
            names = zone_names or {}
            for z in np.unique(zones[inside]):
                cx, cy = float(np.mean(x[zones == z])), float(np.mean(y[zones == z]))
                ax.annotate(str(names.get(int(z), int(z))), (cx, cy), xytext=(6, 6), textcoords="offset points",
                            fontsize=style.LABEL_FONT_SIZE, fontweight="bold", color=style.INK, zorder=30,
                            path_effects=_halo(2.6))
            handles.append(Line2D([], [], marker="s", linestyle="none", markerfacecolor=style.PAPER,
                                  markeredgecolor=style.PATCH_EDGE, markersize=6, label="zone node (labelled)"))
        if handles:
            fig.legend(handles=handles, loc="outside lower center", ncols=min(len(handles), 3),
                       fontsize=style.FONT_SIZE - 1, handlelength=1.8)
        finish_map(ax, geometry)
    return fig


def network_map(path, x, y, lines, **options):
    """Save :func:`render_network_map`'s picture as a PNG at ``path`` (written atomically)."""
    from ..io._atomic import atomic_path
    fig = render_network_map(np.asarray(x, dtype=float), np.asarray(y, dtype=float), lines, **options)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png")
    return path
