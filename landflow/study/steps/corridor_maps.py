"""Study step: per-pair corridor maps, corridor extent and pinch points."""

import numpy as np
import pandas as pd

from ...analyses.priority import corridor, corridor_cells_table
from ..schema import Key, Section
from ._patch_settings import check_pair_list, pair_map, resolve_pairs, share_in_unit_interval

NAME = "corridor_maps"
SETTINGS = Section({
    "pairs": Key(list, [], "patch pairs to map, e.g. [[1, 2], [3, 5]]; empty = every connected pair",
                 check=check_pair_list),
    "corridor_share": Key(float, 0.5, "share of a pair's summed cell current that its corridor holds "
                                      "(the fewest cells that carry it), in (0, 1]", check=share_in_unit_interval),
    "pinch_share": Key(float, 0.05, "a corridor cell is a pinch point when at least this share of the pair's "
                                   "unit current passes through it, in (0, 1]", check=share_in_unit_interval),
    "top_cells": Key(int, 10, "corridor cells listed per pair in corridor_cells.csv",
                     check=lambda v: None if v >= 1 else "must be at least 1"),
}, "Corridor of each patch pair: its current as a share of the pair's peak cell current, the corridor extent "
   "and pinch points. Writes pair_maps/A-B/corridor.tif and share_of_peak_current.tif, corridor_overlap.tif, "
   "pinch_points.tif and corridor_cells.csv.")


#: Why the analysis needs a grid: a network study refuses it with this reason.
GRID_ONLY = ("corridor extents and pinch points are maps of cells; on a network, current_density gives the current "
             "on every edge and restoration_gain ranks the edges")


def check(ctx, settings):
    resolve_pairs(ctx, settings["pairs"], "analyses.corridor_maps.pairs")


def run(ctx, settings):
    voltages = ctx.voltages
    graph = ctx.graph
    ids = graph.patch_ids
    pairs = resolve_pairs(ctx, settings["pairs"], "analyses.corridor_maps.pairs")
    if pairs is None:
        k = graph.n_patches
        pairs = [(a, b) for a in range(k) for b in range(a + 1, k) if voltages.connected(a, b)]
    inside_landscape = graph.node_of_cell >= 0
    overlap = np.where(inside_landscape, 0.0, np.nan)
    pinches = np.where(inside_landscape, 0.0, np.nan)
    tables = []
    for a, b in pairs:
        if not voltages.connected(a, b):
            ctx.warn(f"corridor_maps: patches {ids[a]} and {ids[b]} are in separate pieces of the landscape; "
                     "no corridor joins them.")
            continue
        found = corridor(voltages, a, b, share=settings["corridor_share"], pinch_share=settings["pinch_share"])
        ctx.write_raster(pair_map(ids[a], ids[b], "share_of_peak_current.tif"), found.share_of_peak, per_node=False,
                         units="1 (share of the pair's largest cell current)",
                         description=f"current between patches {ids[a]} and {ids[b]} divided by its largest "
                                     "cell value; patch cells are nodata")
        classes = np.where(inside_landscape, found.inside.astype(float) + found.pinch, np.nan)
        ctx.write_raster(pair_map(ids[a], ids[b], "corridor.tif"), classes, per_node=False,
                         units="class: 0 outside, 1 corridor, 2 pinch point",
                         description=f"corridor of patches {ids[a]}-{ids[b]} holding "
                                     f"{settings['corridor_share']:g} of the summed current, and its pinch points")
        ctx.quicklook(pair_map(ids[a], ids[b], "corridor.png"), np.where(classes > 0, classes, np.nan),
                      title=f"Corridor of patches {ids[a]}-{ids[b]} and its pinch points", units="class",
                      kind="classes", backdrop=True, class_names={1: "corridor", 2: "pinch point"},
                      class_colours={1: "#88ccee", 2: "#882255"})
        overlap += found.inside
        pinches += found.pinch
        tables.append(corridor_cells_table(found, ctx.grid, ids, top=settings["top_cells"]))
    if not tables:
        return
    ctx.write_raster("corridor_overlap.tif", overlap, per_node=False, units="number of pairs",
                     description="how many of the mapped pairs' corridors include each cell")
    ctx.write_raster("pinch_points.tif", pinches, per_node=False, units="number of pairs",
                     description="for how many of the mapped pairs each cell is a pinch point")
    ctx.write_table("corridor_cells.csv", pd.concat(tables, ignore_index=True),
                    description="the corridor cells carrying the most current per pair, with map coordinates "
                                "of their centres and whether each is a pinch point",
                    units="row/col; map units; A per A injected; 1")
    ctx.quicklook("corridor_overlap.png", overlap, title="Corridors: pairs sharing each cell",
                  units="number of pairs", kind="count", backdrop=True)
    ctx.quicklook("pinch_points.png", pinches, title="Pinch points: pairs squeezing through each cell",
                  units="number of pairs", kind="count", backdrop=True)
    ctx.summary["pinch points (any mapped pair)"] = f"{int(np.nansum(pinches > 0)):,} cells"
