"""Study step: re-solve on a changed landscape and report what changes."""

import logging

import numpy as np

from ...analyses.current import pair_weights
from ...analyses.priority import scenario_change
from ...analyses.resistance import patch_voltages
from ...errors import InputError
from ...graph import build_graph
from ..schema import REQUIRED, Key, Section

log = logging.getLogger("landflow")

NAME = "scenario_change"
SETTINGS = Section({
    "changed_landscape": Key(str, REQUIRED, "the landscape after the planned change: a raster of the same kind "
                                            "as [landscape] (resistance, conductance, or suitability, which "
                                            "goes through the same transform) on the same grid; on a network "
                                            "study, an edge file read as [network] edges is, between the same "
                                            "nodes", path="input"),
    "use_patch_weights": Key(bool, True, "weight pairs in the current density by the product of the "
                                          "patches' weights (when patch weights are given)"),
}, "What-if: solves again on a changed landscape raster (for example a planned underpass or a new road) "
   "and reports the change of every pair's effective resistance and of current density. Writes "
   "scenario_change.csv and current_density_change.tif.",
    renamed={"weight_by_strength": "use_patch_weights"})

_KEY = "analyses.scenario_change.changed_landscape"


def _changed_grid(ctx, settings):
    try:
        return ctx.read_landscape_like(settings["changed_landscape"], _KEY)
    except InputError as exc:
        raise InputError(f"{ctx.study.path or 'study'}: '{_KEY}': {exc}") from None


def check(ctx, settings):
    if ctx.is_network:
        ctx.read_changed_network(settings["changed_landscape"], _KEY)
    else:
        _changed_grid(ctx, settings)


def run(ctx, settings):
    solver = ctx.study.settings["solver"]
    if ctx.is_network:
        changed, graph = ctx.read_changed_network(settings["changed_landscape"], _KEY)
    else:
        land = ctx.study.settings["landscape"]
        grid = _changed_grid(ctx, settings)
        try:
            graph = build_graph(grid, ctx.patches.labels, kind=ctx.kind, neighbours=land["neighbours"],
                                edge_rule=land["edge_rule"], values_per=land["values_per"])
        except InputError as exc:
            raise InputError(f"{ctx.study.path or 'study'}: '{_KEY}': {exc}") from None
    after = patch_voltages(graph, method=solver["method"], tolerance=solver["tolerance"], progress=log.info)
    ctx.add_solvers("patch voltages of the changed landscape", after.solvers)
    patch_weight = ctx.patch_weight if settings["use_patch_weights"] else None
    before = ctx.voltages
    table, change, totals = scenario_change(before, after, pair_weights(before, patch_weight),
                                            pair_weights(after, patch_weight))
    ctx.write_table("scenario_change.csv", table,
                    description="effective resistance of every pair before and after the change",
                    units="resistance x map unit; percent")
    if ctx.is_network:
        change = ctx.write_raster("current_density_change.tif", change.ravel()[_one_node_each(ctx.graph)],
                                  units="A (current density after minus before)",
                                  description="change of the current density through each node caused by the change")
    else:
        ctx.write_raster("current_density_change.tif", change, per_node=False,
                         units="A (current density after minus before)",
                         description="change of the current density through each cell caused by the change")
    _summary(ctx, totals)
    if ctx.is_network:
        ctx.quicklook("current_density_change.png", change, title="Change of current density (after minus before)",
                      units="A (current density after minus before)", kind="change",
                      marks=ctx.changed_edges(changed), mark_label="edge added or changed")
        return
    before_values = np.where(ctx.grid.mask, ctx.grid.values, np.nan)
    after_values = np.where(grid.mask, grid.values, np.nan)
    changed = ~((before_values == after_values) | (np.isnan(before_values) & np.isnan(after_values)))
    ctx.quicklook("current_density_change.png", change, title="Change of current density (after minus before)",
                  units="A (current density after minus before)", kind="change", marks=changed,
                  mark_label="landscape changed here")


def _one_node_each(graph):
    """One cell of each graph node (to read per-cell values back per node)."""
    cells = np.zeros(graph.n_nodes, dtype=np.int64)
    flat = graph.node_of_cell.ravel()
    inside = np.flatnonzero(flat >= 0)
    cells[flat[inside]] = inside
    return cells


def _summary(ctx, totals):
    before_c, after_c = totals["connectivity_before"], totals["connectivity_after"]
    ctx.summary["scenario: overall connectivity before / after"] = (
        f"{before_c:.4g} / {after_c:.4g} pair weight per resistance x map unit "
        f"({100 * (after_c - before_c) / before_c:+.2f}%)"
        if before_c > 0 else f"{before_c:.4g} / {after_c:.4g} pair weight per resistance x map unit")
