"""The analyses a study can request, each a module with NAME, SETTINGS (a Section) and run(ctx, settings).

They run in the order listed here, whatever the order in the study file.
"""

from . import current_density, effective_resistance

ANALYSES = {step.NAME: step for step in (effective_resistance, current_density)}
