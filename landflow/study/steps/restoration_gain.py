"""Study step: where lowering resistance would most lower effective resistance."""

import numpy as np
import pandas as pd

from ...analyses.priority import check_connected_pairs, edge_restoration_gain, objective_weights, restoration_gain
from ...errors import ConfigError, InputError
from ..schema import Key, Section
from ._patch_settings import check_pair_list, resolve_pairs

NAME = "restoration_gain"
SETTINGS = Section({
    "pairs": Key(list, [], "the objective: the sum of effective resistance over these patch pairs, e.g. "
                           "[[1, 2]]; empty = every connected pair, weighted", check=check_pair_list),
    "use_patch_weights": Key(bool, True, "with every pair, weight each by the product of the patches' "
                                         "weights (when patch weights are given)"),
    "top_cells": Key(int, 20, "cells listed in restoration_gain_cells.csv (edges in restoration_gain_edges.csv on a "
                              "network)",
                     check=lambda v: None if v >= 1 else "must be at least 1"),
}, "Restoration gain: for every cell, the first-order drop of the objective (effective resistance of one "
   "pair or a weighted sum over pairs) per unit reduction of the cell's resistance (per unit increase of "
   "conductance on a conductance surface). Writes restoration_gain.tif, restoration_gain_relative.tif and "
   "restoration_gain_cells.csv.",
    renamed={"weight_by_strength": "use_patch_weights"})


def check(ctx, settings):
    """The objective's node pairs (None = every connected pair), each in one piece of the landscape."""
    pairs = resolve_pairs(ctx, settings["pairs"], "analyses.restoration_gain.pairs")
    try:
        check_connected_pairs(ctx.graph, pairs or [])
    except InputError as exc:
        raise ConfigError(f"{ctx.study.path or 'study'}: 'analyses.restoration_gain.pairs': {exc}") from None
    return pairs


def run(ctx, settings):
    pairs = check(ctx, settings)
    voltages = ctx.voltages
    patch_weight = ctx.patch_weight if settings["use_patch_weights"] and pairs is None else None
    weights = objective_weights(voltages, pairs, patch_weight)
    if ctx.is_network:
        _network(ctx, settings, voltages, weights)
        return
    gain = restoration_gain(voltages, ctx.grid, weights, kind=ctx.kind)
    per = "reduction of resistance" if ctx.kind == "resistance" else "increase of conductance"
    units = f"objective units per unit {per} (map units x pair weight for a resistance surface)"
    ctx.write_raster("restoration_gain.tif", gain, per_node=False, units=units,
                     description=f"first-order drop of the objective per unit {per} of each cell")
    relative = gain * np.where(ctx.graph.node_of_cell >= 0, ctx.grid.values, np.nan)
    ctx.write_raster("restoration_gain_relative.tif", relative, per_node=False,
                     units="objective units (resistance x map unit x pair weight)",
                     description="gain times the cell's own value: the first-order drop of the objective if "
                                 "the cell's value changed by 100% (f times this for a fraction f)")
    ctx.quicklook("restoration_gain.png", gain, title="Restoration gain", units=units, kind="log")
    flat = gain.reshape(-1)
    landscape = np.flatnonzero(np.isfinite(flat))          # cells outside the landscape have no gain to list
    top = landscape[np.argsort(-flat[landscape], kind="stable")[: settings["top_cells"]]]
    rows, cols = np.unravel_index(top, gain.shape)
    x, y = ctx.grid.xy(rows, cols)
    patch = ctx.patches.labels[rows, cols]
    ctx.write_table("restoration_gain_cells.csv", pd.DataFrame({
        "row": rows, "col": cols, "x": x, "y": y, "value": ctx.grid.values[rows, cols],
        "gain": gain[rows, cols], "relative_gain": relative[rows, cols], "patch": patch}),
        description="the cells with the largest restoration gain, with map coordinates of their centres",
        units="row/col; map units; surface unit; as restoration_gain.tif; patch label (0 = none)")


def _network(ctx, settings, voltages, weights):
    """Gain per network edge, its rank, and the best edges as a table."""
    net = ctx.network
    gain = edge_restoration_gain(voltages, weights, ctx.merged_edges())
    resistance = 1.0 / net.conductance
    units = "objective units per unit reduction of the edge's resistance (pair weight)"
    rank = pd.Series(gain).rank(ascending=False, method="min").to_numpy()
    ctx.write_edge_values("restoration_gain", gain, units=units,
                          description="first-order drop of the objective per unit reduction of each edge's resistance")
    ctx.write_edge_values("restoration_gain_relative", gain * resistance, units="objective units (pair weight x "
                          "resistance unit)", description="gain times the edge's resistance: the first-order drop "
                                                          "of the objective if its resistance were halved, times 2")
    ctx.write_edge_values("restoration_gain_rank", rank, units="rank (1 = the edge whose resistance matters most)",
                          description="edges ranked by restoration gain: 1 is the edge whose resistance the "
                                      "objective depends on most")
    top = np.argsort(-gain, kind="stable")[: settings["top_cells"]]
    table = pd.DataFrame({"rank": rank[top].astype(int), "edge": net.edge_id[top], "from": net.node_id[net.source[top]],
                          "to": net.node_id[net.target[top]], "resistance": resistance[top], "gain": gain[top],
                          "relative_gain": (gain * resistance)[top]})
    ctx.write_table("restoration_gain_edges.csv", table,
                    description="the edges with the largest restoration gain (line number or feature id, end nodes)",
                    units="rank; edge; node ids; resistance unit; as restoration_gain in network_edges.csv")
    ctx.quicklook("restoration_gain.png", None, title="Restoration gain per edge", units=units, kind="log")
    best = top[0]
    ctx.summary["edge where lowering resistance helps most"] = (
        f"{net.edge_label} {net.edge_id[best]} (nodes {net.node_id[net.source[best]]}-{net.node_id[net.target[best]]}): "
        f"gain {gain[best]:.4g} {units}")
