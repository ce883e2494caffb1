"""The API takes what notebook users hold: DataArrays with a CRS, GeoDataFrames; and gives DataArrays back."""

import geopandas as gpd
import numpy as np
import pytest
import rasterio
import rioxarray
import xarray as xr
from shapely.geometry import box

import landflow as lf
from landflow.io.rasters import read_grid


@pytest.fixture
def raster(tif):
    values = np.random.default_rng(6).lognormal(0.0, 0.5, (9, 12)).astype("float32")
    values[0, 0] = -9999.0
    return tif("resistance.tif", values, nodata=-9999.0, cell=(20.0, 25.0))


def test_from_xarray_reads_what_rasterio_reads(raster):
    """Reference: the same file read by rasterio (read_grid) and by rioxarray."""
    expected = read_grid(raster)
    grid = lf.Grid.from_xarray(rioxarray.open_rasterio(raster))        # (band, y, x) with one band
    assert grid.same_grid(expected) is None
    np.testing.assert_array_equal(grid.mask, expected.mask)
    np.testing.assert_array_equal(grid.values[grid.mask], expected.values[expected.mask])


def test_to_xarray_is_georeferenced_and_round_trips_through_rasterio(raster, tmp_path):
    grid = read_grid(raster)
    labels = np.zeros(grid.shape, dtype=int)
    labels[2, 2], labels[7, 10] = 1, 2
    graph = lf.build_graph(grid, labels)
    voltages = lf.patch_voltages(graph)
    current = lf.current_density(voltages)
    da = graph.to_xarray(current, name="current_density", units="A")
    assert da.dims == ("y", "x") and da.attrs["units"] == "A" and da.name == "current_density"
    assert da.rio.crs == rasterio.crs.CRS.from_epsg(3035) and da.rio.transform() == grid.transform
    x, y = grid.xy(4, 5)
    assert float(da.sel(x=x, y=y)) == pytest.approx(graph.to_raster(current, dtype=float)[4, 5])
    da.rio.to_raster(tmp_path / "current.tif")
    with rasterio.open(tmp_path / "current.tif") as src:
        assert src.transform == grid.transform
        np.testing.assert_allclose(src.read(1), graph.to_raster(current, dtype=float), equal_nan=True)


def test_from_array_refuses_a_dataarray_and_from_xarray_needs_a_crs(raster):
    da = rioxarray.open_rasterio(raster).squeeze("band", drop=True)
    with pytest.raises(lf.InputError, match=r"Grid.from_array got an xarray object.*use Grid.from_xarray"):
        lf.Grid.from_array(da)
    bare = xr.DataArray(np.ones((3, 3)), dims=("y", "x"), coords={"y": [2.5, 1.5, 0.5], "x": [0.5, 1.5, 2.5]},
                        name="r")
    with pytest.raises(lf.InputError, match=r"DataArray 'r' has no CRS; set it with da.rio.write_crs"):
        lf.Grid.from_xarray(bare)
    with pytest.raises(lf.InputError, match=r"expected a 2-D \(y, x\) array or a single band"):
        lf.Grid.from_xarray(xr.concat([da, da], dim="band"))


def test_patches_from_a_geodataframe_match_a_patch_raster(raster):
    grid = read_grid(raster)
    x0, y0 = grid.transform.c, grid.transform.f
    frame = gpd.GeoDataFrame({"pond": ["north", "south"]},
                             geometry=[box(x0 + 40, y0 - 75, x0 + 80, y0 - 25), box(x0 + 180, y0 - 200, x0 + 220, y0 - 150)],
                             crs="EPSG:3035")
    patches = lf.patches_from_features(frame, grid, id_column="pond")
    labels = np.zeros(grid.shape, dtype=int)
    labels[1:3, 2:4] = 1
    labels[6:8, 9:11] = 2
    np.testing.assert_array_equal(patches.labels, labels)
    assert patches.id_table == {1: "north", 2: "south"}
