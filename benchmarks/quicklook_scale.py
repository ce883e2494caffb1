"""Quick-look maps of growing grids: time and extra memory stay bounded once a grid is drawn from blocks.

Draws one log-scale map (with patches, nodata and a resistance backdrop) of an n x n grid for each size and
prints seconds and the peak of memory allocated while drawing (tracemalloc, numpy arrays included), both
as ratios against the smallest size measured in the same run. Grids over ``style.MAX_MAP_PIXELS`` cells
are drawn from block-reduced copies (see landflow.maps.block_reduce), so above that size the time should
grow only with the cost of one pass over the grid, and the extra memory with one strip of rows.

    PYTHONPATH=. python benchmarks/quicklook_scale.py --sizes 500 1000 2000 4000
"""

import argparse
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

from landflow.maps import MapGeometry, quicklook


def case(n, folder):
    rng = np.random.default_rng(n)
    values = np.exp(rng.normal(0.0, 1.0, (n, n)))
    landscape = np.ones((n, n), bool)
    landscape[: n // 8, : n // 8] = False                 # a nodata corner
    patches = np.zeros((n, n), np.int32)
    for k, (r, c) in enumerate(rng.integers(0, n - n // 50, (12, 2)), start=1):
        patches[r:r + n // 50, c:c + n // 50] = k
    geometry = MapGeometry.from_cells((n, n), 10.0, (0.0, 10.0 * n), crs_label="EPSG:3035", units="m")
    tracemalloc.start()
    start = time.perf_counter()
    quicklook(Path(folder) / f"map_{n}.png", values, geometry, kind="log", title=f"{n} x {n}", units="A",
              patches=patches, landscape=landscape, backdrop=values)
    seconds = time.perf_counter() - start
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return seconds, peak, values.nbytes


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[500, 1000, 2000, 4000])
    args = parser.parse_args()
    rows = []
    with tempfile.TemporaryDirectory() as folder:
        for n in args.sizes:
            rows.append((n, *case(n, folder)))
    base_t, base_m = rows[0][1], rows[0][2]
    print(f"{'grid':>11} {'cells':>12} {'seconds':>8} {'x base':>7} {'peak MB':>8} {'x base':>7} {'peak / grid':>11}")
    for n, seconds, peak, grid_bytes in rows:
        print(f"{n:>5} x {n:<5} {n * n:>12,} {seconds:>8.2f} {seconds / base_t:>7.2f} {peak / 1e6:>8.1f} "
              f"{peak / base_m:>7.2f} {peak / grid_bytes:>11.2f}")


if __name__ == "__main__":
    main()
