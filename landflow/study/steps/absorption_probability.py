"""Study step: for every cell, the chance that each patch is the first one a walker from there enters."""

import numpy as np

from ...analyses.absorption import absorption_probability, most_likely_destination
from ..schema import Key, Section
from ._patch_settings import patch_id_list, patch_ids_or_all

NAME = "absorption_probability"
SETTINGS = Section({
    "patches": Key(list, [], "patch ids whose map to write (absorption_probability_patch_ID.tif); "
                             "empty = every patch", check=patch_id_list),
}, "Absorption probability into every patch at once (one factorised system): per patch, the chance that it is "
   "the first patch a walker from each cell enters; the most likely destination; with [mortality], the "
   "probability of dying first (death_probability.tif).")


def check(ctx, settings):
    return patch_ids_or_all(ctx, settings["patches"], f"analyses.{NAME}.patches")


def run(ctx, settings):
    wanted = check(ctx, settings)
    walk = ctx.absorbing_walk
    probability, death = absorption_probability(walk)
    ids = [int(p) for p in ctx.graph.patch_ids]
    units = "probability (0 to 1)"
    for pid in wanted:
        a = ids.index(pid)
        ctx.write_raster(f"absorption_probability_patch_{pid}.tif", probability[:, a], units=units,
                         description=f"probability that patch {pid} is the first patch a walker from each cell "
                                     "enters")
    best = most_likely_destination(walk, probability).astype(float)
    best[best == 0] = np.nan
    cells = ctx.write_raster("most_likely_destination.tif", best, units="patch id",
                             description="the patch a walker from each cell most likely enters first "
                                         "(nodata where no patch can be reached)")
    ctx.quicklook("most_likely_destination.png", cells, title="Most likely first patch", units="patch id",
                  log_scale=False, categorical=True)
    if ctx.mortality is not None:
        cells = ctx.write_raster("death_probability.tif", death, units=units,
                                 description="probability that a walker from each cell dies before entering "
                                             "any patch")
        ctx.quicklook("death_probability.png", cells, title="Probability of dying before reaching a patch",
                      units=units, kind="probability")
        inside = walk.transient
        ctx.summary["death probability off patches (mean / max)"] = (
            f"{death[inside].mean():.4g} / {death[inside].max():.4g} (probability, 0 to 1)" if inside.size else "n/a")
    total = probability.sum(axis=1) + death
    ok = total[walk.transient]
    if ok.size:
        ctx.summary["absorption + death, largest distance from 1"] = f"{np.abs(ok - 1).max():.2e} (probability)"
