"""Regional flow maps without patches: current between source nodes on a ring around each tile, tiled on Dask.

See docs/regional.md for the method, the settings and the checks.
"""

from ._config import NAME, SETTINGS, is_regional_study, load_regional_study
from ._plan import Tile, TilePlan, plan_tiles, task_memory_bytes
from ._run import check_regional, regional_plan, run_regional
from ._tiles import TileJob, solve_tile, tile_flow

__all__ = ["NAME", "SETTINGS", "is_regional_study", "load_regional_study", "Tile", "TilePlan", "plan_tiles",
           "task_memory_bytes", "check_regional", "regional_plan", "run_regional", "TileJob", "solve_tile",
           "tile_flow"]
