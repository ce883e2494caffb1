"""Reading and writing GeoTIFF: what goes in comes out, and failures leave no file behind."""

import numpy as np
import pytest
import rasterio
from affine import Affine

import landflow as lf
from landflow.io import rasters
from landflow.io.rasters import NODATA, read_aligned, read_grid, write_geotiff


def _grid(tif, shape, *, cell=(25.0, 30.0), nodata=-1.0):
    values = np.random.default_rng(0).lognormal(size=shape).astype("float32")
    values[0, 0] = nodata
    return read_grid(tif("in.tif", values, nodata=nodata, cell=cell)), values


@pytest.mark.parametrize("shape, overviews", [((7, 9), []), ((600, 520), [2, 4])])
def test_round_trip_keeps_georeference_nodata_and_values(tmp_path, tif, shape, overviews):
    """The output is a Cloud-Optimized GeoTIFF as GDAL itself reports it (IMAGE_STRUCTURE LAYOUT=COG)."""
    grid, values = _grid(tif, shape)
    assert not grid.mask[0, 0] and grid.mask.sum() == values.size - 1
    out = np.where(grid.mask, grid.values * 3.0, np.nan)
    write_geotiff(tmp_path / "out.tif", out, grid, description="three times the input", units="A")
    with rasterio.open(tmp_path / "out.tif") as src:
        structure = src.tags(ns="IMAGE_STRUCTURE")
        assert structure["LAYOUT"] == "COG" and structure["PREDICTOR"] == "3"
        assert src.overviews(1) == overviews      # down to one 256 x 256 tile
        assert src.descriptions == ("three times the input",)
        assert src.units == ("A",) and src.tags(1)["units"] == "A"
        assert src.crs == rasterio.crs.CRS.from_epsg(3035)
        assert src.transform == grid.transform == Affine(25.0, 0, 4_321_000.0, 0, -30.0, 3_210_000.0)
        assert src.nodata == NODATA
        assert src.dtypes == ("float32",)
        assert src.count == 1 and src.shape == shape
        assert src.profile["compress"] == "deflate"
        assert src.profile["tiled"] and src.block_shapes == [(256, 256)]
        data = src.read(1)
    np.testing.assert_array_equal(data[~grid.mask], NODATA)
    np.testing.assert_array_equal(data[grid.mask], out[grid.mask].astype("float32"))
    again = read_grid(tmp_path / "out.tif")
    assert again.same_grid(grid) is None
    np.testing.assert_array_equal(again.mask, grid.mask)


def test_read_grid_marks_nodata_and_non_finite_cells(tif):
    values = np.array([[1.0, np.nan, 3.0], [np.inf, 5.0, 6.0]])
    no_nodata = read_grid(tif("a.tif", values))
    assert no_nodata.nodata is None
    np.testing.assert_array_equal(no_nodata.mask, [[True, False, True], [False, True, True]])
    nan_nodata = read_grid(tif("b.tif", values, nodata=np.nan))
    np.testing.assert_array_equal(nan_nodata.mask, [[True, False, True], [True, True, True]])
    value_nodata = read_grid(tif("c.tif", values, nodata=3.0))
    np.testing.assert_array_equal(value_nodata.mask, [[True, True, False], [True, True, True]])


def test_read_grid_keeps_cell_size_and_crs(tif):
    grid = read_grid(tif("a.tif", np.ones((3, 4), dtype="float32"), cell=(20.0, 50.0)))
    assert grid.cell_size == (20.0, 50.0)
    assert grid.crs.to_epsg() == 3035
    x, y = grid.xy(0, 0)
    assert (x, y) == (4_321_000.0 + 10.0, 3_210_000.0 - 25.0)
    assert tuple(int(v) for v in grid.rowcol(x, y)) == (0, 0)


def test_write_is_atomic(tmp_path, tif, monkeypatch):
    grid, _ = _grid(tif, (5, 6))
    target = tmp_path / "out.tif"
    real_open = rasterio.open

    class Broken:
        """Opens the real file, then fails halfway through writing."""
        def __init__(self, path, *args, **kwargs):
            self.path = path
            self.dataset = real_open(path, *args, **kwargs)

        def __enter__(self):
            return self

        def write(self, *args):
            self.dataset.close()
            raise OSError("disk full (simulated)")

        def __exit__(self, *exc):
            if not self.dataset.closed:       # closing twice fails in rasterio 1.4.0's copy-on-close COG mode
                self.dataset.close()

    monkeypatch.setattr(rasters.rasterio, "open", Broken)
    with pytest.raises(OSError, match="disk full"):
        write_geotiff(target, grid.values, grid)
    assert list(tmp_path.iterdir()) == [tmp_path / "in.tif"]        # neither the file nor a partial one

    monkeypatch.undo()
    write_geotiff(target, grid.values, grid)
    before = target.read_bytes()
    monkeypatch.setattr(rasters.rasterio, "open", Broken)
    with pytest.raises(OSError, match="disk full"):
        write_geotiff(target, grid.values * 2, grid)
    assert target.read_bytes() == before                              # the earlier file is untouched
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.tif", "out.tif"]


def test_profile_overlay_without_nodata_keeps_nan(tmp_path, tif):
    grid, _ = _grid(tif, (5, 6))
    out = np.where(grid.mask, 1.0, np.nan)
    write_geotiff(tmp_path / "out.tif", out, grid, nodata=None, compress="zstd")
    with rasterio.open(tmp_path / "out.tif") as src:
        assert src.nodata is None and src.profile["compress"] == "zstd"
        assert src.tags(ns="IMAGE_STRUCTURE")["LAYOUT"] == "COG"
        data = src.read(1)
    assert np.isnan(data[0, 0]) and (data[grid.mask] == 1.0).all()


def test_write_rejects_an_array_of_another_shape(tmp_path, tif):
    grid, _ = _grid(tif, (5, 6))
    with pytest.raises(lf.InputError, match=r"out\.tif: array of shape \(6, 5\) does not fit the grid \(5, 6\) of .*in\.tif"):
        write_geotiff(tmp_path / "out.tif", np.zeros((6, 5)), grid)
    assert not (tmp_path / "out.tif").exists()


def test_read_aligned_accepts_the_same_grid(tif):
    grid, values = _grid(tif, (4, 5))
    other = read_aligned(tif("other.tif", values * 2, nodata=-1.0, cell=(25.0, 30.0)), grid)
    assert other.same_grid(grid) is None


def test_write_cog_writes_whole_numbers_without_a_float_predictor(tmp_path):
    """write_cog is the writer for any grid (tiles of a regional run too): integers keep predictor off."""
    labels = np.arange(300 * 270, dtype=np.int32).reshape(300, 270) % 7
    transform = Affine(5.0, 0, 600_000.0, 0, -5.0, 5_000_000.0)
    rasters.write_cog(tmp_path / "labels.tif", labels, transform=transform, crs="EPSG:32633", dtype="uint8",
                      nodata=255, resampling="nearest", description="class")
    with rasterio.open(tmp_path / "labels.tif") as src:
        assert src.tags(ns="IMAGE_STRUCTURE")["LAYOUT"] == "COG" and src.dtypes == ("uint8",)
        assert src.overviews(1) == [2] and src.transform == transform
        np.testing.assert_array_equal(src.read(1), labels)
        assert set(np.unique(src.read(1, out_shape=(150, 135)))) <= set(range(7))   # nearest: no new classes


def test_cog_blocks_compressed_on_several_threads_give_the_same_file(tmp_path, monkeypatch):
    # GDAL compresses a COG's blocks on landflow's threads; the file does not depend on how many
    from landflow import solve
    values = np.random.default_rng(4).lognormal(size=(600, 700)).astype(np.float32)
    values[:50, :80] = np.nan
    transform = Affine(25.0, 0, 4_000_000.0, 0, -25.0, 3_000_000.0)
    written = []
    for threads in (1, 3):
        monkeypatch.setattr(solve, "compute_threads", lambda threads=threads: threads)
        path = tmp_path / f"threads{threads}.tif"
        rasters.write_cog(path, values, transform=transform, crs="EPSG:3035", description="current")
        written.append(path.read_bytes())
    assert written[0] == written[1]
    with rasterio.open(tmp_path / "threads3.tif") as src:
        np.testing.assert_array_equal(src.read(1, masked=True).filled(np.nan), values)
