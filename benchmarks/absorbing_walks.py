"""Cost of the absorbing-walk analyses relative to the effective-resistance solve on the same landscape.

Prints ratios against a baseline measured in the same run (the k - 1 grounded solves of patch_voltages), so
the numbers compare across machines. Not part of the test suite.

Run:  PYTHONPATH=. python benchmarks/absorbing_walks.py [size] [patches]
"""

import sys
import time
import warnings

import numpy as np

import landflow as lf
from landflow.analyses.absorption import release_expected_steps


def landscape(size, patches, seed=0):
    rng = np.random.default_rng(seed)
    resistance = np.exp(rng.normal(0.0, 1.0, (size, size)))
    labels = np.zeros((size, size), dtype=int)
    for p, (r, c) in enumerate(rng.integers(2, size - 2, (patches, 2)), start=1):
        labels[r - 1:r + 2, c - 1:c + 2] = p
    mortality = np.full((size, size), 1e-3)
    return resistance, labels, mortality


def timed(fn):
    start = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - start


def main(size=400, patches=10):
    resistance, labels, mortality = landscape(size, patches)
    graph = lf.build_graph(lf.Grid.from_array(resistance), labels)
    _, base = timed(lambda: lf.patch_voltages(graph, method="direct"))
    print(f"{size} x {size} cells, {graph.n_patches} patches; baseline patch_voltages (direct): {base:.2f} s")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        walk, t_walk = timed(lambda: lf.absorbing_walk(graph, mortality, method="direct"))
        _, t_abs = timed(lambda: lf.absorption_probability(walk))
        _, t_steps = timed(lambda: lf.expected_steps(walk))
        _, t_arrival = timed(lambda: lf.arrival_table(walk))
        _, t_release = timed(lambda: release_expected_steps(walk))
        _, t_hit = timed(lambda: lf.hitting_probability(walk, 1, 2))
        sample, t_sim = timed(lambda: lf.simulate_walks(graph, release_patch=1, mortality=mortality,
                                                        walkers=2000, seed=0))
    rows = [("factorise the absorbing walk", t_walk), ("absorption into every patch + death", t_abs),
            ("expected steps", t_steps), ("arrival table", t_arrival), ("expected steps from patches", t_release),
            ("hitting probability for a new pair (own factorisation)", t_hit),
            ("simulate 2000 walkers", t_sim)]
    for name, seconds in rows:
        print(f"  {name:<58s} {seconds:7.2f} s  = {seconds / base:6.2f} x baseline")
    steps = int(sample.steps.sum())
    print(f"  simulator: {steps:,} walker-steps, {steps / t_sim / 1e6:.2f} million per second")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
