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
    table = resistance_table(voltages, matrix)
    if ctx.is_network:
        _write(ctx, matrix, table, "resistance unit (the edges' own)")
        return
    width, height = ctx.grid.cell_size_metres()
    per = ctx.study.settings["landscape"]["values_per"]
    table["cell_width"], table["cell_height"], table["values_per"] = width, height, per   # R depends on them
    ctx.write_table("effective_resistance.csv", table,
                    description="one row per patch pair: effective resistance, escape probability each way, "
                                "commute time, and the cell size and reading of the values the resistance "
                                "depends on", units="resistance x map unit (per length) or resistance (per "
                                                    "square); probability; steps; cell size in metres (map units "
                                                    "when the CRS is projected)")
    _write_matrix(ctx, matrix, "resistance x map unit")
    finite = matrix[np.triu_indices_from(matrix, 1)]
    finite = finite[np.isfinite(finite)]
    if finite.size:
        ctx.summary["effective resistance (min / median / max)"] = (
            f"{finite.min():.4g} / {np.median(finite):.4g} / {finite.max():.4g} on cells of {width:.4g} x "
            f"{height:.4g} {'m' if ctx.grid.is_geographic else 'map units'}, values read per {per}"
            + (" (these numbers scale with the cell size; see docs/method.md)" if per == "length" else ""))


def _write_matrix(ctx, matrix, units):
    ids = [int(p) for p in ctx.graph.patch_ids]
    square = pd.DataFrame(matrix, index=pd.Index(ids, name="patch"), columns=ids)
    ctx.write_table("effective_resistance_matrix.csv", square, index=True,
                    description="square matrix of effective resistance between patches (inf: not connected)",
                    units=units)


def _write(ctx, matrix, table, units):
    """A network's tables: its resistances are in the edges' own resistance unit (no cell size enters)."""
    ctx.write_table("effective_resistance.csv", table,
                    description="one row per zone pair: effective resistance, escape probability each way and "
                                "commute time", units=f"{units}; probability; steps")
    _write_matrix(ctx, matrix, units)
    finite = matrix[np.triu_indices_from(matrix, 1)]
    finite = finite[np.isfinite(finite)]
    if finite.size:
        ctx.summary["effective resistance (min / median / max)"] = (
            f"{finite.min():.4g} / {np.median(finite):.4g} / {finite.max():.4g} ({units})")
