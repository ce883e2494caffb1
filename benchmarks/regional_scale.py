"""Scale benchmark of regional flow maps: a 10,000 x 10,000 COG to a COG, and the speed-up from 1 to 2 workers.

    python benchmarks/regional_scale.py --case scale            # 10^8 cells, 2 local workers
    python benchmarks/regional_scale.py --case speedup          # 2000 x 2000, 4 tiles, 1 then 2 workers
    python benchmarks/regional_scale.py --case scale --size 2000   # the same pipeline, small, to try it out

The landscape is invented (a log-normal resistance from seeded plane waves at several scales plus cell noise),
generated and written block by block, so no process ever holds all of it. Each case writes its input, study
file, results and a JSON summary under --out, and prints one markdown table row per run. These are heavy runs:
on a shared machine wrap them in ``flock`` so that they never overlap another heavy job.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

BLOCK = 1000


def landscape_block(r0, c0, rows, cols, seed=7):
    """Resistance of cells [r0, r0 + rows) x [c0, c0 + cols): exp of plane waves plus noise, seamless across blocks."""
    rng = np.random.default_rng(seed)
    waves = []
    for wavelength, amplitude in ((3000, 0.8), (900, 0.6), (250, 0.5), (60, 0.35)):
        for _ in range(4):
            angle, phase = rng.uniform(0, np.pi), rng.uniform(0, 2 * np.pi)
            waves.append((2 * np.pi / wavelength * np.cos(angle), 2 * np.pi / wavelength * np.sin(angle), phase,
                          amplitude / 2))
    rr = np.arange(r0, r0 + rows, dtype=float)[:, None]
    cc = np.arange(c0, c0 + cols, dtype=float)[None, :]
    field = np.zeros((rows, cols))
    for ky, kx, phase, amplitude in waves:
        field += amplitude * np.sin(ky * rr + kx * cc + phase)
    noise = np.random.default_rng([seed, r0, c0]).normal(0.0, 0.3, (rows, cols))
    return np.exp(1.5 + field + noise).astype(np.float32)


def make_input(path, size, cell=30.0):
    """Write the invented landscape as a COG, block by block (bounded memory)."""
    import rasterio
    import rasterio.shutil
    from rasterio.transform import from_origin
    from rasterio.windows import Window

    from landflow.io.rasters import COG_PROFILE

    path = Path(path)
    if path.exists():
        return path
    scratch = path.with_name(path.stem + ".scratch.tif")
    with rasterio.Env(GDAL_CACHEMAX=256 * 1024 * 1024):
        with rasterio.open(scratch, "w", driver="GTiff", height=size, width=size, count=1, dtype="float32",
                           nodata=-9999.0, crs="EPSG:32633", transform=from_origin(400000.0, 6000000.0, cell, cell),
                           tiled=True, blockxsize=256, blockysize=256, compress="zstd", BIGTIFF="IF_SAFER") as dst:
            for r0 in range(0, size, BLOCK):
                for c0 in range(0, size, BLOCK):
                    rows, cols = min(BLOCK, size - r0), min(BLOCK, size - c0)
                    dst.write(landscape_block(r0, c0, rows, cols), 1, window=Window(c0, r0, cols, rows))
        opts = {k: v for k, v in COG_PROFILE.items() if k not in ("driver", "dtype", "count", "nodata")}
        tmp = path.with_name(path.name + ".partial")
        rasterio.shutil.copy(scratch, tmp, driver="COG", BIGTIFF="IF_SAFER", NUM_THREADS="ALL_CPUS", **opts)
        os.replace(tmp, path)
    scratch.unlink()
    return path


def write_study(folder, raster, *, tile, ring_nodes, relative=True, results="results"):
    study = Path(folder) / f"{results}.toml"
    study.write_text(f"""[landscape]
resistance = "{Path(raster).name}"

[analyses.regional_current]
ring_nodes = {ring_nodes}
tile = {tile}
relative_to_uniform = {str(relative).lower()}

[output]
folder = "{results}"
""", encoding="utf-8")
    return study


def run(study, workers):
    from landflow.regional import run_regional
    started = time.perf_counter()
    manifest = run_regional(study, workers=workers)
    seconds = time.perf_counter() - started
    return seconds, manifest


def load():
    return " ".join(f"{v:.1f}" for v in os.getloadavg())


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--case", choices=("scale", "speedup"), required=True)
    parser.add_argument("--size", type=int, default=None, help="cells per side (scale: 10000, speedup: 2000)")
    parser.add_argument("--tile", type=int, default=1000)
    parser.add_argument("--ring-nodes", type=int, default=32)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--out", default=str(Path(__file__).resolve().parent / "out" / "regional_scale"))
    args = parser.parse_args(argv)
    import logging
    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(message)s", datefmt="%H:%M:%S")
    logging.getLogger("landflow").setLevel(logging.INFO)
    size = args.size or (10000 if args.case == "scale" else 2000)
    out = Path(args.out) / f"{args.case}_{size}"
    out.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    raster = make_input(out / "resistance.tif", size)
    made = time.perf_counter() - started
    print(f"input {raster}: {size} x {size} cells, made in {made:.0f} s (load {load()})", flush=True)
    rows = []
    if args.case == "scale":
        study = write_study(out, raster, tile=args.tile, ring_nodes=args.ring_nodes)
        before = load()
        seconds, manifest = run(study, args.workers)
        r = manifest["regional"]
        rows.append({"case": "scale", "cells": size * size, "workers": args.workers, "tiles": r["tiles"],
                     "tiles_solved": r["tiles_solved"], "seconds": round(seconds, 1),
                     "tile_seconds": manifest["timings_seconds"]["tiles"],
                     "mosaic_seconds": manifest["timings_seconds"]["mosaic"],
                     "peak_worker_gb": round(r["peak_memory_per_worker_bytes"] / 1e9, 2),
                     "driver_peak_gb": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024 / 1e9, 2),
                     "unknowns_per_task": r["unknowns_per_task"], "load_before": before, "load_after": load()})
    else:
        for workers in (1, 2):
            study = write_study(out, raster, tile=args.tile, ring_nodes=args.ring_nodes, relative=False,
                                results=f"results_{workers}_workers")
            before = load()
            seconds, manifest = run(study, workers)
            r = manifest["regional"]
            rows.append({"case": "speedup", "cells": size * size, "workers": workers, "tiles": r["tiles"],
                         "tiles_solved": r["tiles_solved"], "seconds": round(seconds, 1),
                         "tile_seconds": manifest["timings_seconds"]["tiles"],
                         "peak_worker_gb": round(r["peak_memory_per_worker_bytes"] / 1e9, 2),
                         "load_before": before, "load_after": load()})
        rows[1]["speedup"] = round(rows[0]["tile_seconds"] / rows[1]["tile_seconds"], 2)
    (out / "summary.json").write_text(json.dumps(rows, indent=1), encoding="utf-8")
    for row in rows:
        print("| " + " | ".join(f"{k}={v}" for k, v in row.items()) + " |", flush=True)


if __name__ == "__main__":
    main()
