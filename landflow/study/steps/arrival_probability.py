"""Study step: patch-to-patch arrival table, with the probability of dying on the way."""

from ...analyses.absorption import arrival_table
from ..schema import Section

NAME = "arrival_probability"
SETTINGS = Section({}, "Arrival probability between patches: for walkers released from each patch (spread over "
                       "the cells on its boundary in proportion to the conductance leaving it), the chance of "
                       "arriving first at each other patch, and of dying on the way. Writes "
                       "arrival_probability.csv.")


def run(ctx, settings):
    walk = ctx.absorbing_walk
    with ctx.forward_warnings():
        table = arrival_table(walk)
    ctx.write_table("arrival_probability.csv", table, units="probability (0 to 1)",
                    description="one row per release patch and outcome (arrival at another patch, or death): "
                                "the probability of that outcome")
