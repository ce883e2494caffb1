"""A small invented study with every analysis that draws a map or a chart, run once for the report tests."""

from pathlib import Path

import numpy as np
import pytest
import rasterio
from affine import Affine

from landflow.study.run import run_study


def _tif(path, array, nodata):
    array = np.asarray(array)
    with rasterio.open(path, "w", driver="GTiff", height=array.shape[0], width=array.shape[1], count=1,
                       dtype=array.dtype.name, crs="EPSG:3035", nodata=nodata,
                       transform=Affine(20.0, 0.0, 4_321_000.0, 0.0, -20.0, 3_210_000.0)) as dst:
        dst.write(array, 1)


STUDY = """
[landscape]
resistance = "resistance.tif"

[patches]
raster = "patches.tif"

[mortality]
raster = "mortality.tif"

[solver]
method = "direct"

[output]
folder = "results"

[analyses.effective_resistance]
[analyses.current_density]
[analyses.corridor_ranking]
least_cost = true
[analyses.corridor_maps]
pairs = [[1, 2], [3, 5]]
[analyses.restoration_gain]
[analyses.scenario_change]
changed_landscape = "changed.tif"
[analyses.least_cost_paths]
[analyses.absorption_probability]
[analyses.arrival_probability]
[analyses.walk_simulation]
walkers = 200
seed = 3
release_patches = [1]
"""


def make_study(folder):
    """Write the study's rasters and study file into ``folder``; returns the study file."""
    folder = Path(folder)
    rng = np.random.default_rng(11)
    rows, cols = 30, 40
    resistance = np.exp(rng.normal(0.0, 0.6, (rows, cols))).astype("float32")
    resistance[20:26, 4:10] = -9999.0                       # a lake: nodata
    resistance[:, 22] = 25.0                                 # a road
    changed = resistance.copy()
    changed[14:16, 22] = 1.0                                 # the what-if: a crossing
    mortality = np.where(resistance == 25.0, 0.2, 0.001).astype("float32")
    mortality[resistance < 0] = -9999.0
    patches = np.zeros((rows, cols), dtype="int32")
    for pid, (r, c) in enumerate([(3, 3), (4, 34), (26, 30), (15, 12), (12, 28)], start=1):
        patches[r:r + 2, c:c + 2] = pid
    _tif(folder / "resistance.tif", resistance, -9999.0)
    _tif(folder / "changed.tif", changed, -9999.0)
    _tif(folder / "mortality.tif", mortality, -9999.0)
    _tif(folder / "patches.tif", patches, 0)
    (folder / "study.toml").write_text(STUDY, encoding="utf-8")
    return folder / "study.toml"


@pytest.fixture(scope="session")
def report_run(tmp_path_factory):
    """The manifest and output folder of one run of the small study (shared by the report tests)."""
    folder = tmp_path_factory.mktemp("report_study")
    manifest = run_study(make_study(folder))
    return manifest, Path(manifest["folder"])
