"""Shared functions of the study and batch tests: small invented landscapes and study files over them."""

import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import rasterio
from rasterio.transform import from_origin

ROOT = Path(__file__).resolve().parents[2]


def write_raster(path, array, dtype="float32", nodata=-9999.0):
    array = np.asarray(array)
    profile = {"driver": "GTiff", "height": array.shape[0], "width": array.shape[1], "count": 1,
               "dtype": dtype, "crs": "EPSG:25832", "transform": from_origin(500_000.0, 5_300_000.0, 10.0, 10.0),
               "nodata": nodata}
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(array.astype(dtype), 1)
    return path


def make_landscape(folder, *, rows=24, cols=30, seed=1):
    """Resistance, suitability (0-1) and a four-patch raster in ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    resistance = np.exp(rng.normal(0.0, 0.7, (rows, cols)))
    write_raster(folder / "resistance.tif", resistance)
    write_raster(folder / "suitability.tif", rng.uniform(0.0, 1.0, (rows, cols)))
    labels = np.zeros((rows, cols), dtype=np.uint8)
    labels[1:3, 1:3] = 1
    labels[1:3, cols - 3:cols - 1] = 2
    labels[rows - 3:rows - 1, 1:3] = 3
    labels[rows - 3:rows - 1, cols - 3:cols - 1] = 4
    write_raster(folder / "patches.tif", labels, dtype="uint8", nodata=0)
    return folder


def write_study(path, body):
    path = Path(path)
    path.write_text(textwrap.dedent(body).lstrip(), encoding="utf-8")
    return path


def study_text(landscape='resistance = "resistance.tif"', folder="results", extra=""):
    return f"""
    [landscape]
    {landscape}

    [patches]
    raster = "patches.tif"

    [output]
    folder = "{folder}"
    quicklooks = false

    [analyses.effective_resistance]

    [analyses.current_density]
    {extra}
    """


def run_cli(*args, cwd=None, timeout=120, env=None):
    env = {"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin", "HOME": str(cwd or ROOT), **(env or {})}
    return subprocess.run([sys.executable, "-m", "landflow", *map(str, args)], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout)
