"""Study step: rank the links between patches by the overall connectivity lost without each."""

import numpy as np

from ...analyses.current import pair_weights
from ...analyses.priority import corridor_ranking
from ..schema import Key, Section

NAME = "corridor_ranking"
SETTINGS = Section({
    "use_patch_weights": Key(bool, True, "weight each pair by the product of the two patches' weights "
                                         "(when patch weights are given)"),
    "least_cost": Key(bool, True, "add the least-cost distance of each pair beside its effective resistance"),
}, "Ranking of the links between patches by the drop in overall connectivity (sum of weight / effective "
   "resistance over pairs) if the link were lost. Writes corridor_ranking.csv.",
    renamed={"weight_by_strength": "use_patch_weights"})


def run(ctx, settings):
    voltages = ctx.voltages
    patch_weight = ctx.patch_weight if settings["use_patch_weights"] else None
    weights = pair_weights(voltages, patch_weight)
    distance = None
    if settings["least_cost"]:
        distance = ctx.least_cost.matrix
    table = corridor_ranking(voltages, weights, least_cost=distance)
    ctx.write_table("corridor_ranking.csv", table,
                    description="one row per patch pair, ranked by the drop in overall connectivity if the "
                                "direct link between the two patches were lost",
                    units="see docs/prioritisation.md")
    top = table.iloc[0]
    if np.isfinite(top["effective_resistance"]):
        ctx.summary["most important link"] = (
            f"patches {ctx.patches.name_of(top['patch_a'])}-{ctx.patches.name_of(top['patch_b'])}, losing it lowers "
            "overall connectivity "
            f"by {100 * top['connectivity_drop_share']:.1f}%")
