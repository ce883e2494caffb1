"""Study step: probability of reaching one patch before another (or before any other patch)."""

from ...analyses.absorption import hitting_probability
from ..schema import Key, Section
from ._patch_settings import check_pair_list, pair_map, patch_id_list, patch_ids_or_all

NAME = "hitting_probability"
SETTINGS = Section({
    "pairs": Key(list, [], "pairs [A, B] of patch ids; for each, a map of P(reach A before B) "
                           "(pair_maps/A-B/hitting_probability_A_before_B.tif)", check=check_pair_list, example=[[1, 2]]),
    "before_any_other": Key(list, [], "patch ids A; for each, a map of P(reach A before any other patch) "
                                      "(hitting_probability_A_before_any_other.tif)", check=patch_id_list,
                            example=[1]),
}, "Hitting probability: for every cell, the chance that a walker starting there reaches patch A before "
   "patch B (other patches do not stop it), or before any other patch. Give 'pairs', 'before_any_other' or "
   "both. Uses [mortality] when given.",
    check=lambda s: None if s["pairs"] or s["before_any_other"] else
    "needs 'pairs' (such as [[1, 2]]) or 'before_any_other' (such as [1])")


def check(ctx, settings):
    """Every named patch exists, checked before any step solves."""
    patch_ids_or_all(ctx, [p for pair in settings["pairs"] for p in pair], f"analyses.{NAME}.pairs")
    patch_ids_or_all(ctx, settings["before_any_other"], f"analyses.{NAME}.before_any_other")


def run(ctx, settings):
    pairs, singles = settings["pairs"], settings["before_any_other"]
    walk = ctx.absorbing_walk
    units = "probability (0 to 1)"
    for a, b in pairs:
        with ctx.forward_warnings():
            h = hitting_probability(walk, a, b)
        cells = ctx.write_raster(pair_map(a, b, f"hitting_probability_{a}_before_{b}.tif"), h, units=units,
                                 description=f"probability that a walker from each cell reaches patch {a} "
                                             f"before patch {b}")
        ctx.quicklook(pair_map(a, b, f"hitting_probability_{a}_before_{b}.png"), cells, units=units, kind="probability",
                      title=f"Probability of reaching patch {a} before patch {b}")
    for a in singles:
        with ctx.forward_warnings():
            h = hitting_probability(walk, a)
        cells = ctx.write_raster(f"hitting_probability_{a}_before_any_other.tif", h, units=units,
                                 description=f"probability that a walker from each cell reaches patch {a} "
                                             "before any other patch")
        ctx.quicklook(f"hitting_probability_{a}_before_any_other.png", cells, units=units, kind="probability",
                      title=f"Probability of reaching patch {a} before any other patch")
    ctx.add_solvers("hitting probability (two patches absorbing)",
                    [other.solver for other in walk.related.values()])
