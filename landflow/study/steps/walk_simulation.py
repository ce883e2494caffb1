"""Study step: a seeded simulation of walkers from each patch, beside the exact results, to cross-check them."""

import numpy as np
import pandas as pd

from ...analyses.absorption import arrival_table, release_expected_steps
from ...analyses.simulate import sample_table, simulate_walks
from ..schema import Key, Section
from ._patch_settings import patch_id_list, patch_ids_or_all


def _at_least(n):
    return lambda value: None if value >= n else f"must be {n} or more"


NAME = "walk_simulation"
QUANTILES = (0.05, 0.25, 0.5, 0.75, 0.95)
SETTINGS = Section({
    "walkers": Key(int, 1000, "walkers released from each patch", check=_at_least(2)),
    "seed": Key(int, 0, "seed of the random numbers (a whole number >= 0); the same seed gives the same walks",
                check=lambda v: None if v >= 0 else "must be a whole number 0 or more, such as 1"),
    "max_steps": Key(int, 1_000_000, "walkers still walking after this many steps are counted as unfinished",
                     check=_at_least(1)),
    "release_patches": Key(list, [], "patch ids to release walkers from; empty = every patch",
                           check=patch_id_list),
}, "Walk simulation: releases walkers from patches and reports arrival and death shares with standard errors "
   "beside the exact arrival probabilities (walk_simulation_arrival.csv), and the mean and quantiles of the "
   "number of steps beside the exact expected steps (walk_simulation_steps.csv). Uses [mortality] when given.")


def check(ctx, settings):
    return patch_ids_or_all(ctx, settings["release_patches"], f"analyses.{NAME}.release_patches")


def run(ctx, settings):
    wanted = check(ctx, settings)
    walk = ctx.absorbing_walk
    with ctx.forward_warnings():
        exact = arrival_table(walk)
    exact_steps = release_expected_steps(walk).set_index("release_patch")["expected_steps"]
    rng = np.random.default_rng(settings["seed"])
    arrival, steps = [], []
    for pid in wanted:
        ends = exact.loc[exact["release_patch"] == pid, "probability"].sum()
        if not ends > 0:
            ctx.warn(f"walk simulation: walkers from patch {pid} can reach no other patch and cannot die; "
                     "not simulated.")
            continue
        sample = simulate_walks(ctx.walk_graph, release_patch=pid, mortality=ctx.mortality, walkers=settings["walkers"],
                                seed=rng, max_steps=settings["max_steps"])
        table = sample_table(sample, pid)
        truth = exact[exact["release_patch"] == pid]
        table = table.merge(truth[["outcome", "arrival_patch", "probability"]], on=["outcome", "arrival_patch"],
                            how="left").rename(columns={"probability": "exact_probability"})
        arrival.append(table)
        mean, se = sample.mean_steps()
        row = {"release_patch": pid, "walkers": sample.walkers, "unfinished": sample.unfinished,
               "mean_steps": mean, "standard_error": se, "exact_expected_steps": exact_steps[pid]}
        row.update({f"steps_q{int(q * 100):02d}": v for q, v in zip(QUANTILES, sample.steps_quantiles(QUANTILES))})
        steps.append(row)
        if sample.unfinished:
            ctx.warn(f"walk simulation from patch {pid}: {sample.unfinished} of {sample.walkers} walkers were still "
                     f"walking after {settings['max_steps']} steps; the simulated shares and steps leave them out. "
                     "Raise max_steps.")
    if not arrival:
        return
    arrival = pd.concat(arrival, ignore_index=True)
    # judged against the binomial standard error of the exact probability, defined even when no walker arrived;
    # the simulated shares (and their standard errors) are out of every walker released, unfinished included
    p = arrival["exact_probability"].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        arrival["difference_in_standard_errors"] = (
            (arrival["simulated_probability"] - p) / np.sqrt(p * (1 - p) / settings["walkers"]))
    ctx.write_table("walk_simulation_arrival.csv", arrival, units="probability (0 to 1); standard errors",
                    description="simulated share of walkers from each release patch arriving at each other patch "
                                "or dying, its standard error, the exact probability and their difference in "
                                "binomial standard errors of the exact probability")
    ctx.write_table("walk_simulation_steps.csv", pd.DataFrame(steps), units="steps",
                    description="simulated steps per release patch: mean, standard error, the exact expected "
                                "steps and quantiles of the number of steps")
