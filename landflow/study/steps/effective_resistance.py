"""Study step: pairwise effective resistance, escape probabilities and commute times."""

import numpy as np
import pandas as pd

from ...analyses.resistance import effective_resistance, resistance_table
from ..schema import Section

NAME = "effective_resistance"
SETTINGS = Section({}, "Effective resistance between every pair of patches, with escape probabilities "
                       "and commute times. Writes effective_resistance.csv and effective_resistance_matrix.csv.")


def run(ctx, settings):
    voltages = ctx.voltages
    matrix = effective_resistance(voltages)
    ctx.write_table("effective_resistance.csv", resistance_table(voltages, matrix),
                    description="one row per patch pair: effective resistance, escape probability each way, "
                                "commute time", units="resistance x map unit; probability; steps")
    ids = [int(p) for p in ctx.graph.patch_ids]
    square = pd.DataFrame(matrix, index=pd.Index(ids, name="patch"), columns=ids)
    ctx.write_table("effective_resistance_matrix.csv", square, index=True,
                    description="square matrix of effective resistance between patches (inf: not connected)",
                    units="resistance x map unit")
    finite = matrix[np.triu_indices_from(matrix, 1)]
    finite = finite[np.isfinite(finite)]
    if finite.size:
        ctx.summary["effective resistance (min / median / max)"] = (
            f"{finite.min():.4g} / {np.median(finite):.4g} / {finite.max():.4g} resistance x map unit")
