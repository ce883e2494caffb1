"""The analyses a study can request, each a module with NAME, SETTINGS (a Section) and run(ctx, settings).

They run in the order listed here, whatever the order in the study file.
"""

from . import (absorption_probability, arrival_probability, corridor_maps, corridor_ranking, current_density,
               edge_criticality, effective_resistance, expected_steps, expected_visits, hitting_probability, least_cost_paths,
               restoration_gain, scenario_change, walk_simulation)

ANALYSES = {step.NAME: step for step in (
    effective_resistance, current_density,
    hitting_probability, absorption_probability, arrival_probability, expected_steps, expected_visits,
    walk_simulation,
    corridor_ranking, corridor_maps, edge_criticality, restoration_gain, scenario_change, least_cost_paths,
)}
