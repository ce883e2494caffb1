"""Study step: current through every cell, summed over patch pairs, and per pair on request."""

import logging

from ...analyses.current import cumulative_current, pair_current, pair_weights
from ..schema import Key, Section

log = logging.getLogger("landflow")

NAME = "current_density"
SETTINGS = Section({
    "weight_by_strength": Key(bool, True, "weight each pair by the product of the two patches' strengths "
                                          "(when strengths are given)"),
    "per_pair": Key(bool, False, "also write one current map per patch pair (pairs/current_A_B.tif)"),
    "voltage_per_pair": Key(bool, False, "also write one voltage map per patch pair (pairs/voltage_A_B.tif)"),
}, "Current density: where movement between patches concentrates.")


def run(ctx, settings):
    voltages = ctx.voltages
    strength = ctx.strength if settings["weight_by_strength"] else None
    weights = pair_weights(voltages, strength)
    last = [0]

    def progress(done, total):
        pct = int(100 * done / total)
        if pct >= last[0] + 20 or done == total:
            last[0] = pct
            log.info("summing current over pairs: %d%%", pct)

    flow = cumulative_current(voltages, weights, progress=progress)
    units = "A (sum over pairs of unit currents" + (", weighted by strength products)" if strength is not None else ")")
    cells = ctx.write_raster("current_density.tif", flow, units=units,
                             description="current through each cell summed over all patch pairs")
    ctx.quicklook("current_density.png", cells, title="Current summed over patch pairs", units=units)
    if not (settings["per_pair"] or settings["voltage_per_pair"]):
        return
    ids = ctx.graph.patch_ids
    k = len(ids)
    for a in range(k):
        for b in range(a + 1, k):
            if not voltages.connected(a, b):
                continue
            tag = f"{ids[a]}_{ids[b]}"
            if settings["per_pair"]:
                ctx.write_raster(f"pairs/current_{tag}.tif", pair_current(voltages, a, b), units="A",
                                 description=f"current for a unit current from patch {ids[a]} to patch {ids[b]}")
            if settings["voltage_per_pair"]:
                ctx.write_raster(f"pairs/voltage_{tag}.tif", voltages.pair_voltage(a, b), units="V (resistance unit x A)",
                                 description=f"voltage for a unit current from patch {ids[a]} to {ids[b]}, 0 at {ids[b]}")
