"""Study step: rank the links between patches by the overall connectivity lost without each."""

import numpy as np

from ...analyses.current import pair_weights
from ...analyses.priority import corridor_ranking
from ..schema import Key, Section

NAME = "corridor_ranking"
SETTINGS = Section({
    "weight_by_strength": Key(bool, True, "weight each pair by the product of the two patches' strengths "
                                          "(when strengths are given)"),
    "least_cost": Key(bool, True, "add the least-cost distance of each pair beside its effective resistance"),
}, "Ranking of the links between patches by the drop in overall connectivity (sum of weight / effective "
   "resistance over pairs) if the link were lost. Writes corridor_ranking.csv.")


def run(ctx, settings):
    voltages = ctx.voltages
    strength = ctx.strength if settings["weight_by_strength"] else None
    weights = pair_weights(voltages, strength)
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
            f"patches {int(top['patch_a'])}-{int(top['patch_b'])}, losing it lowers overall connectivity "
            f"by {100 * top['connectivity_drop_share']:.1f}%")
