"""Study step: current through every cell, summed over patch pairs, and per pair on request."""

import logging

import numpy as np

from ...analyses.current import current_density, edge_current_density, pair_current, pair_weights
from ..schema import Key, Section
from ._patch_settings import pair_map

log = logging.getLogger("landflow")

NAME = "current_density"
SETTINGS = Section({
    "use_patch_weights": Key(bool, True, "weight each pair by the product of the two patches' weights "
                                         "(when patch weights are given)"),
    "pair_current_maps": Key(bool, False, "also write each patch pair's own current map "
                                          "(pair_maps/A-B/current.tif)"),
    "pair_voltage_maps": Key(bool, False, "also write each patch pair's voltage map (pair_maps/A-B/voltage.tif)"),
}, "Current density: where movement between patches concentrates.",
    renamed={"weight_by_strength": "use_patch_weights", "per_pair": "pair_current_maps",
             "voltage_per_pair": "pair_voltage_maps"})


def run(ctx, settings):
    voltages = ctx.voltages
    patch_weight = ctx.patch_weight if settings["use_patch_weights"] else None
    weights = pair_weights(voltages, patch_weight)
    last = [0]

    def progress(done, total):
        pct = int(100 * done / total)
        if pct >= last[0] + 20 or done == total:
            last[0] = pct
            log.info("summing current over pairs: %d%%", pct)

    flow = current_density(voltages, weights, progress=progress)
    units = "A (sum over pairs of unit currents" + (", weighted by patch-weight products)" if patch_weight is not None else ")")
    cells = ctx.write_raster("current_density.tif", flow, units=units,
                             description="current through each cell summed over all patch pairs")
    if ctx.is_network:
        ctx.write_edge_values("current_density", edge_current_density(voltages, weights, edges=ctx.merged_edges()),
                              units=units, description="current along each edge summed over all zone pairs")
    ctx.quicklook("current_density.png", cells, title="Current summed over patch pairs", units=units)
    if not (settings["pair_current_maps"] or settings["pair_voltage_maps"]):
        return
    ids = ctx.graph.patch_ids
    k = len(ids)
    for a in range(k):
        for b in range(a + 1, k):
            if not voltages.connected(a, b):
                continue
            if settings["pair_current_maps"]:
                ctx.write_raster(pair_map(ids[a], ids[b], "current.tif"), pair_current(voltages, a, b), units="A",
                                 description=f"current for a unit current from patch {ids[a]} to patch {ids[b]}")
                if ctx.is_network:
                    i, j, c = ctx.merged_edges()
                    v = voltages.pair_voltage(a, b)
                    ctx.write_edge_values(f"current_{ids[a]}-{ids[b]}", np.nan_to_num(np.abs(c * (v[i] - v[j]))),
                                          units="A", description=f"current along each edge for a unit current "
                                                                 f"from zone {ids[a]} to zone {ids[b]}")
            if settings["pair_voltage_maps"]:
                ctx.write_raster(pair_map(ids[a], ids[b], "voltage.tif"), voltages.pair_voltage(a, b), units="V (resistance unit x A)",
                                 description=f"voltage for a unit current from patch {ids[a]} to {ids[b]}, 0 at {ids[b]}")
