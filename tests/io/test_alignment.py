"""Inputs on other grids, warped onto the landscape's grid only when the study asks, checked with numpy and pyproj."""

import json

import numpy as np
import pytest
from pyproj import Transformer

import landflow as lf
from landflow.io.rasters import read_aligned, read_grid
from landflow.io.sites import read_patch_raster

ORIGIN = (4_321_000.0, 3_210_000.0)


@pytest.fixture
def grid(tif):
    values = np.ones((6, 8), dtype="float32")
    return read_grid(tif("resistance.tif", values, cell=30.0))


def test_mean_of_a_finer_raster_is_the_block_mean(tif, grid):
    """Reference: numpy's mean over the 3 x 3 source cells of each target cell (exact nesting)."""
    fine = np.random.default_rng(1).uniform(0, 0.5, (18, 24))
    path = tif("mortality.tif", fine, cell=10.0)
    with pytest.raises(lf.InputError, match=r"not on the grid of .*resistance.tif.*an \[alignment\] key"):
        read_aligned(path, grid)
    record = []
    got = read_aligned(path, grid, align="mean", record=record)
    expected = fine.reshape(6, 3, 8, 3).mean(axis=(1, 3))
    np.testing.assert_allclose(got.values, expected, rtol=1e-12)
    assert got.mask.all() and got.same_grid(grid) is None
    assert record == [{"input": str(path), "what": "raster", "method": "mean",
                       "from": {"shape": [18, 24], "cell_size": [10.0, 10.0], "crs": "EPSG:3035"},
                       "to": {"shape": [6, 8], "cell_size": [30.0, 30.0]}}]


def test_mode_and_nearest_of_finer_labels(tif, grid):
    """Reference: the majority label of each 3 x 3 block, and the block's centre cell (numpy)."""
    rng = np.random.default_rng(2)
    coarse = rng.integers(0, 4, (6, 8))
    fine = np.kron(coarse, np.ones((3, 3), dtype=int))
    fine[::3, ::3] = 9                      # one odd cell per block: the mode ignores it
    fine[1::3, 1::3] = coarse + 10          # the centre cell: what nearest picks
    path = tif("labels.tif", fine.astype("int32"), cell=10.0)
    np.testing.assert_array_equal(read_patch_raster(path, grid, align="mode").labels, coarse)
    np.testing.assert_array_equal(read_patch_raster(path, grid, align="nearest").labels, coarse + 10)
    with pytest.raises(lf.InputError, match="patch labels cannot be averaged; align the patch raster with"):
        read_patch_raster(path, grid, align="mean")


def test_nearest_from_another_crs_follows_pyproj(tif, grid):
    """Reference: pyproj transforms each target cell centre to lon/lat; the source cell there is the label."""
    to_lonlat = Transformer.from_crs("EPSG:3035", "EPSG:4326", always_xy=True)
    rows, cols = np.indices(grid.shape)
    x, y = grid.xy(rows, cols)
    lon, lat = to_lonlat.transform(x, y)
    step = 0.00005                           # about 4-6 m: much finer than the 30 m cells
    west, north = lon.min() - 0.002, lat.max() + 0.002
    shape = (int((north - lat.min() + 0.002) / step) + 1, int((lon.max() + 0.002 - west) / step) + 1)
    r, c = np.indices(shape)
    labels = ((r // 37) * 7 + (c // 41)) % 50 + 1           # blocks of labels larger than a target cell
    path = tif("lonlat.tif", labels.astype("int32"), cell=step, origin=(west, north), crs="EPSG:4326")
    got = read_patch_raster(path, grid, align="nearest").labels
    sr = np.floor((north - lat) / step).astype(int)
    sc = np.floor((lon - west) / step).astype(int)
    assert (got == labels[sr, sc]).mean() >= 0.95   # GDAL's approximate transformer may differ on block edges


def test_a_study_warps_named_inputs_and_records_it(study, tmp_path, tif):
    path = study(analyses="[analyses.effective_resistance]\n")       # writes resistance.tif and patches.tif
    resistance = read_grid(tmp_path / "resistance.tif")
    labels = read_patch_raster(tmp_path / "patches.tif", resistance).labels
    fine = np.kron(labels, np.ones((2, 2), dtype=int)).astype("int32")
    tif("fine_patches.tif", fine, cell=5.0, nodata=0)
    text = path.read_text().replace('raster = "patches.tif"', 'raster = "fine_patches.tif"')
    path.write_text(text)
    with pytest.raises(lf.InputError, match=r"fine_patches.tif: the patch raster is not on the grid"):
        lf.run_study(path)
    path.write_text(text + '\n[alignment]\npatch_raster = "mode"\n')
    manifest = lf.run_study(path)
    assert manifest["alignment"][0]["method"] == "mode"
    assert manifest["alignment"][0]["from"]["cell_size"] == [5.0, 5.0]
    on_disk = json.loads((tmp_path / "results" / "manifest.json").read_text())
    assert on_disk["alignment"] == manifest["alignment"]
    path.write_text(text + '\n[alignment]\nmortality_raster = "mean"\n')
    with pytest.raises(lf.ConfigError, match=r"'alignment.mortality_raster' is set but \[mortality\] raster is not"):
        lf.run_study(path)
