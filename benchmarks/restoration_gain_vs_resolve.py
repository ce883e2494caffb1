"""Restoration gain from the existing solves against the brute-force alternative (one re-solve per cell).

Prints the time of the gain map and of one full solve of all patch potentials, measured in the same run,
and their ratio; brute force would need one re-solve per landscape cell (two for central differences).

Run:  PYTHONPATH=. python benchmarks/restoration_gain_vs_resolve.py [side]
"""

import sys
import time

import numpy as np

import landflow as lf


def main(side=300, k=8, seed=1):
    rng = np.random.default_rng(seed)
    values = np.exp(rng.normal(0.0, 1.0, size=(side, side)))
    labels = np.zeros((side, side), dtype=int)
    for p, (r, c) in enumerate(rng.integers(2, side - 2, size=(k, 2)), start=1):
        labels[r - 1:r + 2, c - 1:c + 2] = p
    grid = lf.Grid.from_array(values)
    graph = lf.build_graph(grid, labels)
    start = time.perf_counter()
    voltages = lf.patch_voltages(graph, method="direct")
    solve = time.perf_counter() - start
    start = time.perf_counter()
    lf.restoration_gain(voltages, grid, lf.pair_weights(voltages))
    gain = time.perf_counter() - start
    cells = side * side
    print(f"{side} x {side} cells, {k} patches")
    print(f"one solve of all patch potentials: {solve:.2f} s")
    print(f"restoration gain from those solves: {gain:.2f} s  (ratio gain / one solve = {gain / solve:.2f})")
    print(f"central differences would need {2 * cells:,} solves: about {2 * cells * solve / gain:,.0f} x the gain map")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 300)
