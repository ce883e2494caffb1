"""Shared builders of tiny test rasters and study files.

Every raster here is written into pytest's ``tmp_path`` in a projected CRS
(ETRS89-extended / LAEA Europe, EPSG:3035, metres), so no test depends on the
demo data.
"""

from pathlib import Path

import numpy as np
import pytest
import rasterio
from affine import Affine

CRS = "EPSG:3035"
ORIGIN = (4_321_000.0, 3_210_000.0)


def write_tif(path, array, *, nodata=None, cell=(10.0, 10.0), origin=ORIGIN, crs=CRS, dtype=None):
    """Write ``array`` as a single-band GeoTIFF and return its path."""
    array = np.asarray(array)
    width, height = (cell, cell) if np.isscalar(cell) else cell
    transform = Affine(width, 0.0, origin[0], 0.0, -height, origin[1])
    dtype = dtype or array.dtype.name
    with rasterio.open(path, "w", driver="GTiff", height=array.shape[0], width=array.shape[1], count=1,
                       dtype=dtype, crs=crs, transform=transform, nodata=nodata) as dst:
        dst.write(array.astype(dtype), 1)
    return Path(path)


def cell_centre(row, col, *, cell=(10.0, 10.0), origin=ORIGIN):
    """Map coordinates of the centre of cell (row, col) for rasters made by :func:`write_tif`."""
    width, height = (cell, cell) if np.isscalar(cell) else cell
    return origin[0] + (col + 0.5) * width, origin[1] - (row + 0.5) * height


@pytest.fixture
def tif(tmp_path):
    """``tif(name, array, **options)`` writes a GeoTIFF in tmp_path (see :func:`write_tif`)."""
    def make(name, array, **options):
        return write_tif(tmp_path / name, array, **options)
    return make


@pytest.fixture
def centre():
    return cell_centre


def small_landscape():
    """A 6 x 8 resistance surface (nodata -9999 in one corner) and two patches of two cells each."""
    rng = np.random.default_rng(7)
    resistance = rng.lognormal(0.0, 0.5, size=(6, 8)).astype("float32")
    resistance[0, 7] = -9999.0
    patches = np.zeros((6, 8), dtype="int32")
    patches[1, 1:3] = 1
    patches[4, 5:7] = 2
    return resistance, patches


@pytest.fixture
def study(tmp_path):
    """``study(**overrides)`` writes a valid study on a small landscape and returns its path.

    Keyword arguments replace whole parts of the TOML: ``landscape``, ``patches``,
    ``output``, ``analyses`` (each the text of the table body), or ``extra``
    (text appended at the end). Rasters are ``resistance.tif`` and ``patches.tif``.
    """
    resistance, patches = small_landscape()
    write_tif(tmp_path / "resistance.tif", resistance, nodata=-9999.0)
    write_tif(tmp_path / "patches.tif", patches, nodata=0)

    def make(name="study.toml", *, landscape='resistance = "resistance.tif"', patches='raster = "patches.tif"',
             output='folder = "results"\nquicklooks = false', analyses=None, extra=""):
        analyses = analyses if analyses is not None else (
            "[analyses.effective_resistance]\n\n[analyses.current_density]\n")
        text = (f"[landscape]\n{landscape}\n\n[patches]\n{patches}\n\n[output]\n{output}\n\n"
                f"{analyses}\n{extra}\n")
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path
    return make


ROOT = Path(__file__).resolve().parents[1]


def run_cli(*commands, cwd=None):
    """Run ``python -m landflow ARGS`` for each ARGS tuple at once; return their CompletedProcess in order.

    The commands start together so the interpreter start-ups overlap.
    """
    import os
    import subprocess
    import sys

    env = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")]))}
    running = [(args, subprocess.Popen([sys.executable, "-m", "landflow", *map(str, args)], cwd=cwd, env=env,
                                       stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True))
               for args in commands]
    done = []
    for args, process in running:
        stdout, stderr = process.communicate(timeout=300)
        done.append(subprocess.CompletedProcess(args, process.returncode, stdout, stderr))
    return done


@pytest.fixture(scope="session")
def cli():
    return run_cli
