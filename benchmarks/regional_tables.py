"""The correctness tables of docs/regional.md: core flatness against buffer width; tiled against untiled.

    python benchmarks/regional_tables.py --table flatness     # seconds
    python benchmarks/regional_tables.py --table tiling       # 2000 x 2000, heavy: about half an hour on 2 cores

``flatness``: a uniform landscape (300 x 300 cells, one tile), the summed current (not divided by the uniform
reference, which would make it flat by construction) for buffers of 1 to 100 cells: coefficient of variation
over the whole map and over its central half.

``tiling``: two invented 2000 x 2000 landscapes (30 m cells), i.i.d. log-normal resistance (sigma = 1) and a
land-cover mosaic (Voronoi patches of five classes with roads and a river), each mapped whole (one tile) and
in 2 x 2 tiles of 1000 cells, for several margins (k = 32) and several k (margin 100 cells, mosaic only), all
through the study runner (``landflow.regional.run_regional``) with the direct solver, relative to uniform.
Printed: Pearson correlation of the tiled and the untiled map over all cells; the largest, 99th percentile and
median relative difference |tiled - untiled| / untiled; the 99th percentile within 10 cells of a seam between
tiles (at least 50 cells from the landscape's edge). ``--report-only`` remakes the table from the maps written
by an earlier run.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

OUT = Path(__file__).resolve().parent / "out" / "regional_tables"
CELL = 30.0


def flatness():
    from landflow.analyses.regional import ring_current
    from landflow.grid import Grid
    n = 300
    grid = Grid.from_array(np.ones((n, n)), cell_size=CELL)
    rows = ["| buffer (cells) | buffer / map side | CV whole map | CV central half | max / min whole map |",
            "|---|---|---|---|---|"]
    for b in (1, 5, 10, 25, 50, 100, 200):
        flow, _ = ring_current(grid, buffer_cells=b, k=32, buffer_value=1.0, offset=0.5)
        core = flow[b:b + n, b:b + n]
        mid = core[n // 4:3 * n // 4, n // 4:3 * n // 4]
        rows.append(f"| {b} | {b / n:.2f} | {core.std() / core.mean():.3f} | {mid.std() / mid.mean():.3f} | "
                    f"{core.max() / core.min():.2f} |")
        print(rows[-1], flush=True)
    return rows


def lognormal(n, seed=11):
    return np.exp(np.random.default_rng(seed).normal(0.0, 1.0, (n, n)))


def mosaic(n, seed=12):
    """Voronoi patches of forest (1), grassland (3), farmland (10), wetland (30), settlement (100); roads, a river."""
    from scipy.spatial import cKDTree
    rng = np.random.default_rng(seed)
    centres = rng.uniform(0, n, (600, 2))
    classes = rng.choice([1.0, 3.0, 10.0, 30.0, 100.0], size=600, p=[0.3, 0.25, 0.3, 0.05, 0.1])
    rr, cc = np.mgrid[0:n, 0:n]
    _, nearest = cKDTree(centres).query(np.column_stack([rr.ravel(), cc.ravel()]))
    values = classes[nearest].reshape(n, n)
    for slope, intercept in ((0.35, 300.0), (-1.2, 2100.0)):           # two roads, 2 cells wide
        line = np.abs(rr - (slope * cc + intercept)) / np.hypot(1, slope) < 1.0
        values[line] = 300.0
    river = np.abs(rr - (0.5 * n + 0.12 * n * np.sin(cc / n * 5.0))) < 2.0
    values[river] = 60.0
    return values


def write_raster(path, values):
    from rasterio.transform import from_origin

    from landflow.io.rasters import write_cog
    write_cog(path, values, transform=from_origin(500000.0, 6000000.0, CELL, CELL), crs="EPSG:32633")


def run(folder, raster, name, *, tile, margin_cells, k, workers, client, report_only=False):
    from landflow.regional import run_regional
    if report_only:
        return read(folder / name / "regional_current.tif"), "-"
    study = folder / f"{name}.toml"
    study.write_text(f"""[landscape]
resistance = "{raster.name}"

[analyses.regional_current]
ring_nodes = {k}
tile = {tile}
margin = {margin_cells * CELL}
buffer_width = {50 * CELL}
seed = 1

[solver]
method = "direct"

[output]
folder = "{name}"
""", encoding="utf-8")
    started = time.perf_counter()
    run_regional(study, workers=workers, client=client)
    return read(folder / name / "regional_current.tif"), f"{time.perf_counter() - started:.0f}"


def compare(tiled, whole, tile=1000):
    """Correlation; largest, 99th percentile and median relative difference; 99th percentile near the seams."""
    n = whole.shape[0]
    rr, cc = np.mgrid[0:n, 0:n]
    to_seam = np.minimum.reduce([np.abs((rr + 0.5) - tile * np.round((rr + 0.5) / tile)),
                                 np.abs((cc + 0.5) - tile * np.round((cc + 0.5) / tile))])
    to_edge = np.minimum.reduce([rr, cc, n - 1 - rr, n - 1 - cc])
    near = (to_seam < 10) & (to_edge >= 50)
    ok = np.isfinite(tiled) & np.isfinite(whole)
    rel = np.abs(tiled - whole) / whole
    return (np.corrcoef(tiled[ok], whole[ok])[0, 1], rel[ok].max(), np.percentile(rel[ok], 99),
            np.median(rel[ok]), np.percentile(rel[ok & near], 99))


def read(path):
    import rasterio
    with rasterio.open(path) as src:
        data = src.read(1).astype(np.float64)
        data[data == src.nodata] = np.nan
    return data


ROW = ("| {label} | {k} | {m} | {r:.4f} | {worst:.2f} | {p99:.3f} | {p50:.3f} | {seam:.3f} | {seconds} |")
HEAD = ["| landscape | k | margin (cells) | correlation | largest relative difference | 99th percentile | median | "
        "99th percentile within 10 cells of a seam | tiled run (s) |", "|---|---|---|---|---|---|---|---|---|"]


def tiling(workers, report_only=False):
    OUT.mkdir(parents=True, exist_ok=True)
    n = 2000
    landscapes = {"log-normal": lognormal, "land-cover mosaic": mosaic}
    client = cluster = None
    if not report_only:
        from distributed import Client, LocalCluster
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, dashboard_address=":0")
        client = Client(cluster)
    rows = list(HEAD)
    try:
        for label, make in landscapes.items():
            slug = label.replace(" ", "_")
            raster = OUT / f"{slug}.tif"
            if not report_only:
                write_raster(raster, make(n))
            ks = (8, 32, 64) if label == "land-cover mosaic" else (32,)
            for k in ks:
                # one tile (no tiling) on one process: two 4.4-million-unknown factors at once would not fit
                whole, seconds = run(OUT, raster, f"{slug}_whole_k{k}", tile=n, margin_cells=0, k=k, workers=1,
                                     client=None, report_only=report_only)
                print(f"{label} k={k} untiled: {seconds} s", flush=True)
                margins = (0, 50, 100, 200) if k == 32 else (100,)
                for m in margins:
                    tiled, seconds = run(OUT, raster, f"{slug}_tiled_k{k}_m{m}", tile=1000, margin_cells=m, k=k,
                                         workers=workers, client=client, report_only=report_only)
                    r, worst, p99, p50, seam = compare(tiled, whole)
                    rows.append(ROW.format(label=label, k=k, m=m, r=r, worst=worst, p99=p99, p50=p50, seam=seam,
                                           seconds=seconds))
                    print(rows[-1], flush=True)
    finally:
        if client is not None:
            client.close()
            cluster.close()
    return rows


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--table", choices=("flatness", "tiling"), required=True)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--report-only", action="store_true",
                        help="tiling: remake the table from the maps of an earlier run, without solving")
    args = parser.parse_args(argv)
    rows = flatness() if args.table == "flatness" else tiling(args.workers, args.report_only)
    OUT.mkdir(parents=True, exist_ok=True)
    (OUT / f"{args.table}.md").write_text("\n".join(rows) + "\n", encoding="utf-8")
    print("\n".join(rows))


if __name__ == "__main__":
    main()
