"""The what-if scenario equals a full fresh run on the changed raster, through the study runner."""

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import rasterio
from rasterio.transform import from_origin

from landflow.study.run import run_study

TRANSFORM = from_origin(1000.0, 2000.0, 10.0, 10.0)


def write_raster(path, array, dtype="float32", nodata=-9999.0):
    array = np.asarray(array)
    data = np.where(np.isnan(array), nodata, array) if np.issubdtype(array.dtype, np.floating) else array
    with rasterio.open(path, "w", driver="GTiff", height=array.shape[0], width=array.shape[1], count=1,
                       dtype=dtype, crs="EPSG:3035", transform=TRANSFORM, nodata=nodata) as dst:
        dst.write(data.astype(dtype), 1)


def read(path):
    with rasterio.open(path) as src:
        return src.read(1, masked=True).filled(np.nan).astype(float)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("scenario")
    rng = np.random.default_rng(4)
    values = np.exp(rng.normal(1.0, 0.8, size=(14, 18))).astype(np.float32)
    values[6:8, :] = 80.0                      # a road across the landscape
    changed = values.copy()
    changed[6:8, 9] = 1.5                      # an underpass
    changed[10, 3] = np.nan                    # and a new cell outside the landscape
    labels = np.zeros((14, 18), dtype=np.uint8)
    labels[1, 1:3], labels[12, 15], labels[2, 14], labels[11, 2] = 1, 2, 3, 4
    write_raster(tmp / "resistance.tif", values)
    write_raster(tmp / "changed.tif", changed)
    write_raster(tmp / "patches.tif", labels, dtype="uint8", nodata=0)
    common = '[patches]\nraster = "patches.tif"\n[solver]\nmethod = "direct"\n[output]\nquicklooks = false\n'
    (tmp / "whatif.toml").write_text(
        '[landscape]\nresistance = "resistance.tif"\n' + common + 'folder = "whatif"\n'
        "[analyses.effective_resistance]\n[analyses.current_density]\n"
        '[analyses.scenario_change]\nchanged_landscape = "changed.tif"\n')
    (tmp / "fresh.toml").write_text(
        '[landscape]\nresistance = "changed.tif"\n' + common.replace("[output]\n", '[output]\nfolder = "fresh"\n')
        + "[analyses.effective_resistance]\n[analyses.current_density]\n")
    done = subprocess.run([sys.executable, "-m", "landflow", "run", "-q", str(tmp / "whatif.toml")],
                          capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    run_study(tmp / "fresh.toml")
    return tmp


def test_resistance_after_equals_fresh_run(runs):
    table = pd.read_csv(runs / "whatif" / "scenario_change.csv")
    fresh = pd.read_csv(runs / "fresh" / "effective_resistance.csv")
    before = pd.read_csv(runs / "whatif" / "effective_resistance.csv")
    np.testing.assert_allclose(table["resistance_after"], fresh["resistance"], rtol=1e-10)
    np.testing.assert_allclose(table["resistance_before"], before["resistance"], rtol=1e-10)
    np.testing.assert_allclose(table["resistance_change"], fresh["resistance"] - before["resistance"],
                               rtol=1e-8, atol=1e-9)
    # the underpass lowers the resistance between patches on either side of the road
    across = (table["patch_a"] == 1) & (table["patch_b"] == 2)
    assert table.loc[across, "resistance_change"].item() < 0


def test_current_change_equals_fresh_minus_present(runs):
    change = read(runs / "whatif" / "current_density_change.tif")
    present = read(runs / "whatif" / "current_density.tif")
    fresh = read(runs / "fresh" / "current_density.tif")
    expected = np.nan_to_num(fresh) - np.nan_to_num(present)
    assert np.isfinite(change).all()          # no cell is outside on both sides
    np.testing.assert_allclose(change, expected, rtol=1e-5, atol=1e-5 * np.abs(present).max())
    assert change[10, 3] == pytest.approx(-present[10, 3], rel=1e-5)


def test_manifest_records_the_changed_landscapes_solves(runs):
    whatif = json.loads((runs / "whatif" / "manifest.json").read_text(encoding="utf-8"))["solvers"]
    fresh = json.loads((runs / "fresh" / "manifest.json").read_text(encoding="utf-8"))["solvers"]
    assert fresh and len(whatif) == 2 * len(fresh)        # the present landscape's solves and the changed one's
    assert all(s["worst_relative_residual"] < 1e-6 for s in whatif)
    purposes = [s["purpose"] for s in whatif]
    assert purposes.count("patch voltages of the changed landscape") == len(fresh)
    assert purposes.count("patch voltages (effective resistance, current)") == len(fresh)
