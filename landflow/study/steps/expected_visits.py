"""Study step: expected visits to every cell by walkers released from patches or from a source raster."""

import numpy as np

from ...analyses.absorption import expected_visits, node_source
from ..schema import Key, Section
from ._patch_settings import patch_id_list, patch_ids_or_all

NAME = "expected_visits"
SETTINGS = Section({
    "release_patches": Key(list, [], "patch ids; for each, the visits of one walker released from it "
                                     "(expected_visits_from_patch_ID.tif); empty = every patch unless "
                                     "release_raster is given", check=patch_id_list),
    "release_raster": Key(str, None, "raster of walkers released per cell (>= 0, on the landscape's grid; on a "
                                     "patch's cells: released from that patch); writes "
                                     "expected_visits_from_release_raster.tif", path="input"),
}, "Expected visits: where walkers spend their time before they enter a patch (or die).",
    renamed={"source_raster": "release_raster"})


def check(ctx, settings):
    """The release patches: those listed, else every patch unless a source raster is given."""
    wanted = settings["release_patches"]
    if wanted or settings["release_raster"] is None:
        wanted = patch_ids_or_all(ctx, wanted, f"analyses.{NAME}.release_patches")
    return wanted


def run(ctx, settings):
    walk = ctx.absorbing_walk
    wanted = check(ctx, settings)
    for pid in wanted:
        visits = expected_visits(walk, release_patch=pid)
        cells = ctx.write_raster(f"expected_visits_from_patch_{pid}.tif", visits, units="visits per walker",
                                 description=f"expected visits to each cell by one walker released from patch "
                                             f"{pid} before it enters another patch or dies (on patch {pid}: its "
                                             "departures from there)")
        if len(wanted) <= 3:
            ctx.quicklook(f"expected_visits_from_patch_{pid}.png", cells, units="visits per walker",
                          title=f"Expected visits by walkers from patch {pid}")
    if settings["release_raster"] is not None:
        grid = ctx.read_aligned(settings["release_raster"], "release-weight raster")
        source = node_source(ctx.graph, np.where(grid.mask, grid.values, 0.0),
                             source=str(settings["release_raster"]), where=ctx.grid.where)
        visits = expected_visits(walk, source=source)
        cells = ctx.write_raster("expected_visits_from_release_raster.tif", visits, units="visits",
                                 description="expected visits to each cell by all walkers released as the source "
                                             "raster says, before they enter a patch or die")
        ctx.quicklook("expected_visits_from_release_raster.png", cells, units="visits",
                      title="Expected visits by walkers released as the release raster says")
