"""The analyses a study can request, each a module with NAME, SETTINGS (a Section) and run(ctx, settings).

They run in the order listed here, whatever the order in the study file.
"""

from . import (absorption_probability, arrival_probability, current_density, effective_resistance,
               expected_steps, expected_visits, hitting_probability, walk_simulation)

ANALYSES = {step.NAME: step for step in (effective_resistance, current_density, hitting_probability,
                                         absorption_probability, arrival_probability, expected_steps,
                                         expected_visits, walk_simulation)}
