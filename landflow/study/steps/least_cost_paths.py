"""Study step: least-cost distance and least-cost paths between patches."""

import numpy as np

from ...analyses.least_cost import least_cost_table
from ...analyses.resistance import effective_resistance
from ..schema import Key, Section
from ._patch_settings import pair_map

NAME = "least_cost_paths"
SETTINGS = Section({
    "pair_route_maps": Key(bool, False, "also write the cheapest route of each pair "
                                        "(pair_maps/A-B/least_cost_path.tif)"),
}, "The single cheapest route between every pair of patches, on the same edges as the circuit, beside the "
   "effective resistance. Writes least_cost_distance.csv and least_cost_paths.tif.",
    renamed={"per_pair": "pair_route_maps"})


def run(ctx, settings):
    graph = ctx.graph
    result = ctx.least_cost
    resistance = effective_resistance(ctx.voltages)
    ctx.write_table("least_cost_distance.csv", least_cost_table(result, resistance),
                    description="least-cost distance, route length and cells of the cheapest route of every "
                                "pair, with effective resistance and their ratio",
                    units="resistance x map unit; map units; cells; 1")
    count = result.path_count()
    cells = ctx.write_raster("least_cost_paths.tif", count, units="number of pairs",
                             description="how many pairs' cheapest routes pass each cell (patch cells: "
                                         "routes that start, end or pass there)")
    if ctx.is_network:
        ctx.write_edge_values("least_cost_paths", least_cost_use(ctx, result), units="number of pairs",
                              description="how many zone pairs' cheapest routes use each edge")
    ctx.quicklook("least_cost_paths.png", np.where(cells > 0, cells, np.nan), title="Least-cost paths",
                  units="number of pairs", kind="count", backdrop=True)
    if settings["pair_route_maps"]:
        ids = graph.patch_ids
        k = graph.n_patches
        for a in range(k):
            for b in range(a + 1, k):
                nodes = result.path(a, b)
                if nodes.size:
                    on = np.zeros(graph.n_nodes)
                    on[nodes] = 1.0
                    ctx.write_raster(pair_map(ids[a], ids[b], "least_cost_path.tif"), on, units="1 on the route",
                                     description=f"cheapest route between patches {ids[a]} and {ids[b]}")


def least_cost_use(ctx, result):
    """How many pairs' cheapest routes use each network edge (of parallel edges, the cheapest one)."""
    i, j, c = ctx.merged_edges()
    lo, hi = np.minimum(i, j), np.maximum(i, j)
    n = ctx.graph.n_nodes
    key = lo * n + hi
    order = np.lexsort((-c, key))                       # per pair of nodes, the cheapest edge first
    first = np.ones(order.size, dtype=bool)
    first[1:] = key[order][1:] != key[order][:-1]
    cheapest = {int(k): int(e) for k, e in zip(key[order][first], order[first])}
    use = np.zeros(i.size)
    k = ctx.graph.n_patches
    for a in range(k):
        for b in range(a + 1, k):
            nodes = result.path(a, b)
            for x, y in zip(nodes[:-1], nodes[1:]):
                use[cheapest[int(min(x, y) * n + max(x, y))]] += 1
    return use
