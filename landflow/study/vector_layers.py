"""The run's vector results: one GeoPackage (``map_layers.gpkg``) holding what a GIS user looks at.

Layers (each only when the run computed it):

- ``patches``: one polygon per patch with its id, text id, cells, area and weight;
- ``patch_links``: one line per pair of patches (between points inside the two patches) with effective
  resistance, escape probabilities, commute time, least-cost distance and corridor rank;
- ``least_cost_routes``: the cheapest route of each pair through the cell centres;
- ``restoration_cells`` and ``corridor_cells``: the listed cells of restoration_gain_cells.csv and
  corridor_cells.csv as points.

The numbers are those of the CSV tables of the same run.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["FILE", "LAYERS", "vector_layers", "write_vector_layers"]

FILE = "map_layers.gpkg"

LAYERS = {
    "patches": "patch polygons with id, text id, cells, area (map units squared) and weight",
    "patch_links": "lines between patches: effective resistance, escape probabilities, commute time, "
                   "least-cost distance, corridor rank",
    "least_cost_routes": "cheapest route of each patch pair through cell centres, with its least-cost distance",
    "restoration_cells": "cells with the largest restoration gain (restoration_gain_cells.csv) as points",
    "corridor_cells": "listed corridor cells of each pair (corridor_cells.csv) as points",
}


def vector_layers(ctx):
    """Build the GeoDataFrames of a finished run's context, ``{layer name: GeoDataFrame}``."""
    from ..analyses.resistance import resistance_table
    from ..io import vector_results as vr
    from .run import with_patch_names

    graph, grid, patches = ctx.graph, ctx.grid, ctx.patches
    names = patches.names
    attributes = pd.DataFrame(index=pd.Index(graph.patch_ids, name="patch"))
    if patches.weight is not None:
        attributes["weight"] = [patches.weight[int(p)] for p in graph.patch_ids]
    polygons = vr.patch_polygons(np.where(graph.node_of_cell >= 0, patches.labels, 0), grid, attributes)
    layers = {"patches": with_patch_names(polygons, names)}
    anchors = {int(p): (g.x, g.y) for p, g in zip(polygons["patch"], polygons.geometry.representative_point())}

    if "_voltages" in ctx.__dict__:          # only when an analysis solved them
        links = resistance_table(ctx.voltages)
        if "least_cost" in ctx.__dict__:
            matrix = ctx.least_cost.matrix
            index = {int(p): i for i, p in enumerate(graph.patch_ids)}
            links["least_cost_distance"] = [matrix[index[int(a)], index[int(b)]]
                                            for a, b in zip(links.patch_a, links.patch_b)]
        ranking = ctx.tables.get("corridor_ranking.csv")
        if ranking is not None:
            links = links.merge(ranking[["patch_a", "patch_b", "rank"]], on=["patch_a", "patch_b"], how="left")
        layers["patch_links"] = vr.link_lines(with_patch_names(links, names), anchors, grid)

    if "least_cost" in ctx.__dict__:
        result, k = ctx.least_cost, graph.n_patches
        rows, routes = [], []
        cell_of_node = _cell_of_node(graph)
        for a in range(k):
            for b in range(a + 1, k):
                nodes = result.path(a, b)
                if nodes.size < 2:
                    continue
                rows.append({"patch_a": int(graph.patch_ids[a]), "patch_b": int(graph.patch_ids[b]),
                             "least_cost_distance": float(result.distance[a, b]),
                             "path_length": float(result.path_length(nodes)), "path_cells": int(nodes.size - 2)})
                routes.append(_route_xy(nodes, cell_of_node, graph, grid))
        if rows:
            layers["least_cost_routes"] = vr.route_lines(with_patch_names(pd.DataFrame(rows), names), routes, grid)

    for layer, table in (("restoration_cells", "restoration_gain_cells.csv"), ("corridor_cells", "corridor_cells.csv")):
        if table in ctx.tables and len(ctx.tables[table]):
            layers[layer] = vr.cell_points(with_patch_names(ctx.tables[table], names), grid)
    return layers


def _cell_of_node(graph):
    """Flat cell index of every non-patch node (patch nodes: -1)."""
    cells = np.full(graph.n_nodes, -1, dtype=np.int64)
    flat = graph.node_of_cell.reshape(-1)
    inside = np.flatnonzero(flat >= graph.n_patches)
    cells[flat[inside]] = inside
    return cells


def _route_xy(nodes, cell_of_node, graph, grid):
    """Cell centres of a route; a patch end is drawn at its cell nearest to the route's next cell."""
    cols = graph.shape[1]
    inner = cell_of_node[nodes[1:-1]]
    xs, ys = grid.xy(inner // cols, inner % cols)
    xy = np.column_stack([xs, ys]) if inner.size else np.empty((0, 2))

    def end(patch_node, towards):
        rows_, cols_ = np.nonzero(graph.node_of_cell == patch_node)
        px, py = grid.xy(rows_, cols_)
        i = int(np.argmin((px - towards[0]) ** 2 + (py - towards[1]) ** 2))
        return [px[i], py[i]]

    first_target = xy[0] if len(xy) else None
    start = end(nodes[0], first_target) if first_target is not None else None
    if start is None:       # two patches that touch: join their nearest cells
        rows_, cols_ = np.nonzero(graph.node_of_cell == nodes[-1])
        bx, by = grid.xy(rows_, cols_)
        start = end(nodes[0], (bx.mean(), by.mean()))
    finish = end(nodes[-1], xy[-1] if len(xy) else start)
    return np.vstack([start, *xy, finish]) if len(xy) else np.array([start, finish])


def write_vector_layers(ctx):
    """Write :data:`FILE` into the run's folder and record it as an output; returns the layer names."""
    from ..io.vector_results import write_geopackage

    layers = vector_layers(ctx)
    path = ctx._record(FILE, "vector results for a GIS: " + "; ".join(f"{name}: {LAYERS[name]}" for name in layers),
                       "see docs/outputs.md")
    write_geopackage(path, layers)
    return list(layers)
