"""Study step: expected number of steps (and optionally time) until a walker reaches a patch or dies."""

import numpy as np

from ...analyses.absorption import expected_steps, node_crossing_time, release_expected_steps
from ..schema import Key, Section

NAME = "expected_steps"
SETTINGS = Section({
    "crossing_time": Key(str, None, "raster of the time a walker spends crossing each cell (>= 0, any time "
                                    "unit, on the landscape's grid); adds expected_time.tif", path="input"),
}, "Expected steps to absorption: for every cell, the mean number of steps a walker from there takes until it "
   "enters a patch (or dies, with [mortality]); per patch, the same for walkers released from it "
   "(expected_steps_from_patch.csv).")


def _crossing_time(ctx, settings):
    """Per-node crossing time from the study's raster (checked), or None."""
    if settings["crossing_time"] is None:
        return None
    grid = ctx.read_aligned(settings["crossing_time"], "crossing-time raster")
    return node_crossing_time(ctx.graph, np.where(grid.mask, grid.values, np.nan),
                              source=str(settings["crossing_time"]), where=ctx.grid.where)


def check(ctx, settings):
    """The crossing-time raster lies on the grid and holds no negative time, checked before any solve."""
    _crossing_time(ctx, settings)


def run(ctx, settings):
    walk = ctx.absorbing_walk
    tau = _crossing_time(ctx, settings)
    steps = expected_steps(walk)
    t = np.where(np.isfinite(steps), steps, np.nan)
    cells = ctx.write_raster("expected_steps.tif", t, units="steps",
                             description="expected number of steps until a walker from each cell enters a patch "
                                         "or dies (0 on patches; nodata where the walk never ends)")
    ctx.quicklook("expected_steps.png", cells, title="Expected steps until a patch is reached", units="steps")
    time = None
    if tau is not None:
        time = expected_steps(walk, tau)
        ctx.write_raster("expected_time.tif", np.where(np.isfinite(time), time, np.nan),
                         units="time unit of the crossing-time raster",
                         description="expected time until a walker from each cell enters a patch or dies")
    ctx.write_table("expected_steps_from_patch.csv", release_expected_steps(walk, tau, steps=steps, time=time),
                    units="steps; time unit of the crossing-time raster",
                    description="per release patch: expected steps (and time) until arrival at another patch "
                                "or death")
