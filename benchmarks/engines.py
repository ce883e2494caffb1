"""Direct engines side by side on one landscape: landflow end to end against each engine's bare lower bound.

    python benchmarks/engines.py [--side 1000] [--patches 20]

For every direct engine installed (superlu, cholmod, pardiso) it times, in the same run and on the same
log-normal 8-neighbour landscape:

* bare: the engine alone on the grounded Laplacian (factorise, then the k - 1 unit right-hand sides);
* landflow: ``patch_voltages`` (graph to factor to potentials) plus ``current_density``.

It prints the seconds, the ratio landflow / bare for each engine, and which engine is fastest end to end.
``landflow.solve.DIRECT_ENGINES`` lists the engines fastest first from this measurement.
"""

from __future__ import annotations

import argparse
import resource
import time

import numpy as np

import landflow as lf
from landflow import solve
from landflow.graph import nested_dissection_order


def landscape(side, patches, seed=0):
    rng = np.random.default_rng(seed)
    grid = lf.Grid.from_array(rng.lognormal(0.0, 1.0, (side, side)))
    labels = np.zeros((side, side), dtype=np.int64)
    spots = rng.choice(side * side, size=patches, replace=False)
    labels.reshape(-1)[spots] = np.arange(1, patches + 1)
    return lf.build_graph(grid, labels)


def bare(graph, engine):
    """Seconds of the engine alone: factorise the grounded Laplacian, solve the k - 1 unit columns."""
    k = graph.n_patches
    laplacian = graph.laplacian().tocsr()
    if engine == "superlu":
        order = nested_dissection_order(graph)
        keep = order[order != 0]
        matrix, ordering = laplacian[keep][:, keep], np.arange(keep.size)
        position = np.empty(graph.n_nodes, dtype=np.int64)
        position[keep] = np.arange(keep.size)
        rows = position[np.arange(1, k)]
    else:
        matrix, ordering, rows = laplacian[1:, 1:], None, np.arange(k - 1)
        if engine == "cholmod":         # landflow gives CHOLMOD its nested-dissection order
            order = nested_dissection_order(graph)
            ordering = order[order != 0] - 1
    rhs = np.zeros((matrix.shape[0], k - 1))
    rhs[rows, np.arange(k - 1)] = 1.0
    start = time.perf_counter()
    solver = solve.factorize(matrix, method=engine, ordering=ordering)
    solver.solve(rhs)
    return time.perf_counter() - start


def end_to_end(graph, engine):
    start = time.perf_counter()
    voltages = lf.patch_voltages(graph, method=engine)
    lf.current_density(voltages)
    return time.perf_counter() - start


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--side", type=int, default=1000)
    parser.add_argument("--patches", type=int, default=20)
    args = parser.parse_args()
    graph = landscape(args.side, args.patches)
    engines = [e for e in ("superlu", "cholmod", "pardiso") if solve._installed(e)]
    print(f"{args.side} x {args.side} cells, {args.patches} patches; engines installed: {', '.join(engines)}")
    rows = []
    for engine in engines:
        b = bare(graph, engine)
        e = end_to_end(graph, engine)
        rows.append((engine, b, e))
        print(f"{engine:8s} bare {b:7.2f} s   landflow {e:7.2f} s   ratio {e / b:5.2f}   "
              f"peak memory so far {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20:.1f} GB", flush=True)
    fastest = min(rows, key=lambda r: r[2])
    print(f"fastest end to end: {fastest[0]}; relative to it: "
          + ", ".join(f"{name} {e / fastest[2]:.2f}x" for name, _, e in rows))


if __name__ == "__main__":
    main()
