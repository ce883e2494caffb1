"""Study step (networks): how much overall connectivity each network edge's loss would cost, exactly."""

import pandas as pd

from ...analyses.current import pair_weights
from ...analyses.priority import _to_12_digits, edge_loss
from ..schema import Key, Section

NAME = "edge_criticality"
SETTINGS = Section({
    "use_patch_weights": Key(bool, True, "weight each pair by the product of the two zones' weights (when zone "
                                         "weights are given)"),
    "top_edges": Key(int, 20, "edges listed in edge_criticality.csv, most critical first (0 = every edge)",
                     check=lambda v: None if v >= 0 else "must be 0 or more"),
}, "Network studies: for every edge, the drop in overall connectivity (sum of weight / effective resistance over "
   "zone pairs) if the edge were lost, exactly (one solve per edge), and the edges ranked by it. Adds "
   "connectivity_drop, connectivity_drop_share and criticality_rank to network_edges.csv and writes "
   "edge_criticality.csv.")

#: Why the analysis needs a network: a raster study refuses it with this reason.
NETWORK_ONLY = ("it ranks the edges of a network; on a raster, corridor_ranking ranks the links between patches and "
                "restoration_gain the cells")


def run(ctx, settings):
    voltages = ctx.voltages
    net = ctx.network
    weights = pair_weights(voltages, ctx.patch_weight if settings["use_patch_weights"] else None)
    solver = ctx.study.settings["solver"]
    table, solvers = edge_loss(voltages, weights, ctx.merged_edges(), method=solver["method"],
                               tolerance=solver["tolerance"])
    ctx.add_solvers("edge criticality (effective resistance across each edge)", solvers)
    # ties to 12 significant digits share a rank: two edges in series carry the same current and cost the same
    rank = pd.Series(_to_12_digits(table["connectivity_drop"].to_numpy())).rank(ascending=False, method="min")
    units = "pair weight per resistance unit"
    ctx.write_edge_values("connectivity_drop", table["connectivity_drop"], units=units,
                          description="drop in overall connectivity if the edge were lost")
    ctx.write_edge_values("connectivity_drop_share", table["connectivity_drop_share"], units="share (0 to 1)",
                          description="the drop as a share of the overall connectivity")
    ctx.write_edge_values("criticality_rank", rank, units="rank (1 = the edge whose loss costs most)",
                          description="edges ranked by the connectivity their loss would cost")
    listed = pd.DataFrame({"rank": rank.astype(int), "edge": net.edge_id, "from": net.node_id[net.source],
                           "to": net.node_id[net.target], "resistance": 1.0 / net.conductance,
                           "bridge": table["bridge"], "connectivity_drop": table["connectivity_drop"],
                           "connectivity_drop_share": table["connectivity_drop_share"]})
    listed = listed.sort_values(["rank", "edge"], kind="stable")
    if settings["top_edges"]:
        listed = listed.head(settings["top_edges"])
    ctx.write_table("edge_criticality.csv", listed, units=f"rank; edge; node ids; resistance unit; true/false; {units}; "
                                                           "share (0 to 1)",
                    description="network edges ranked by the drop in overall connectivity if each were lost "
                                "(bridge: its loss cuts zones apart)")
    ctx.quicklook("connectivity_drop.png", None, title="Connectivity lost without each edge", units=units,
                  kind="log")
    top = listed.iloc[0]
    ctx.summary["most critical edge"] = (
        f"{net.edge_label} {top['edge']} (nodes {top['from']}-{top['to']}): losing it lowers overall connectivity by "
        f"{100 * top['connectivity_drop_share']:.1f}%" + (" (a bridge: it cuts zones apart)" if top["bridge"] else ""))
