"""The analyses a study can request, each a module with NAME, SETTINGS (a Section) and run(ctx, settings).

They run in the order listed here, whatever the order in the study file. A step may also
define check(ctx, settings), called for every requested step before any step runs, to validate
settings against the inputs (patch labels, grids).
"""

from . import current_density, effective_resistance
from . import corridor_maps, corridor_ranking, least_cost_paths, restoration_gain, scenario_change

ANALYSES = {step.NAME: step for step in (effective_resistance, current_density, corridor_ranking,
                                       corridor_maps, restoration_gain, scenario_change, least_cost_paths)}
