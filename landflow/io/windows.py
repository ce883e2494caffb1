"""Windows of large rasters: read a part, sample the whole, mosaic many parts into one COG in bounded memory."""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import rasterio
import rasterio.shutil
from rasterio.errors import NotGeoreferencedWarning, RasterioIOError
from rasterio.windows import Window

from ..errors import InputError
from ._atomic import atomic_path
from .rasters import COG_PROFILE, NODATA, check_header, valid_values

__all__ = ["RasterInfo", "raster_info", "read_window", "sample_values", "read_decimated", "write_tile",
           "read_tile", "Mosaic", "crs_from_text"]

#: GDAL's block cache while mosaicking and building overviews (bytes): the mosaic's memory bound.
MOSAIC_CACHE_BYTES = 256 * 1024 * 1024


@dataclass(frozen=True)
class RasterInfo:
    """Shape and geo-reference of a raster, without its values."""

    path: str
    rows: int
    cols: int
    transform: object
    crs: object
    nodata: float | None

    @property
    def cell_size(self):
        return abs(self.transform.a), abs(self.transform.e)


def crs_from_text(text):
    """A rasterio CRS from its text (EPSG code or WKT), or None: tasks carry the CRS as text."""
    from rasterio.crs import CRS
    return None if text is None else CRS.from_user_input(text)


def _open(path, what):
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            return rasterio.open(path)
    except RasterioIOError as exc:
        raise InputError(f"cannot read the {what} '{path}': {str(exc).rstrip('. ')}. Check the path (relative "
                         "paths in a study are relative to the study file).") from None


def raster_info(path, *, what="raster", plain_grid_ok=False):
    """The shape, transform, CRS and nodata of band 1 of ``path`` (no values are read)."""
    with _open(path, what) as src:
        check_header(src, path, what, plain_grid_ok=plain_grid_ok)
        t = src.transform
        if t.b != 0 or t.d != 0:
            raise InputError(f"{path}: the {what} is rotated or sheared; warp it to a north-up grid first "
                             "(for example with gdalwarp).")
        return RasterInfo(str(path), src.height, src.width, t, src.crs, src.nodata)


def read_window(path, row0, col0, rows, cols, *, what="raster"):
    """Values and valid mask of the cells ``[row0, row0 + rows) x [col0, col0 + cols)`` of band 1.

    Only that window is read from the file (rasterio windows), so a process
    never holds more of a large raster than its window. The window must lie
    inside the raster.
    """
    with _open(path, what) as src:
        try:
            raw = src.read(1, window=Window(col0, row0, cols, rows))
        except RasterioIOError as exc:
            raise InputError(f"cannot read rows {row0}-{row0 + rows - 1}, columns {col0}-{col0 + cols - 1} of "
                             f"the {what} '{path}': the file is damaged or truncated (GDAL: "
                             f"{str(exc).rstrip('. ')}). Export it again.") from None
        return valid_values(raw, src.nodata)


def sample_values(path, *, max_cells=4_000_000, what="raster"):
    """The valid values of band 1, all of them or an even sample of about ``max_cells``.

    A raster of more cells is read decimated (GDAL reads its overviews when
    it has them, as a COG does), so memory stays near ``max_cells`` numbers.

    Returns
    -------
    values : ndarray of float64 (the valid cells only)
    exact : bool
        True when every cell was read.
    """
    with _open(path, what) as src:
        step = max(1.0, np.sqrt(src.height * src.width / max_cells))
        shape = (max(1, int(src.height / step)), max(1, int(src.width / step)))
        exact = shape == (src.height, src.width)
        raw = src.read(1, out_shape=shape, resampling=rasterio.enums.Resampling.nearest)
        values, mask = valid_values(raw, src.nodata)
    return values[mask], exact


def read_decimated(path, max_side=1200):
    """An even, averaged copy of band 1 at most ``max_side`` cells on a side (GDAL reads the overviews).

    Returns
    -------
    values : ndarray of float64, NaN for nodata
    transform : the copy's affine transform
    crs
    """
    from affine import Affine
    with rasterio.open(path) as src:
        step = max(1.0, max(src.height, src.width) / max_side)
        shape = (max(1, int(src.height / step)), max(1, int(src.width / step)))
        data = src.read(1, out_shape=shape, resampling=rasterio.enums.Resampling.average).astype(np.float64)
        if src.nodata is not None:
            data[data == src.nodata] = np.nan
        a = src.transform
        transform = Affine(a.a * src.width / shape[1], a.b, a.c, a.d, a.e * src.height / shape[0], a.f)
        return data, transform, src.crs


def write_tile(path, array, *, transform, crs):
    """Write a finished tile (float32, NaN as nodata) as a deflated GeoTIFF, atomically."""
    data = np.where(np.isnan(array), NODATA, array).astype(np.float32)
    with atomic_path(path) as tmp:
        with rasterio.open(tmp, "w", driver="GTiff", height=data.shape[0], width=data.shape[1], count=1,
                           dtype="float32", nodata=NODATA, transform=transform, crs=crs, compress="deflate",
                           predictor=3, tiled=data.shape[0] >= 256 and data.shape[1] >= 256) as dst:
            dst.write(data, 1)


def read_tile(path):
    """A tile written by :func:`write_tile`, as float64 with NaN for nodata."""
    with rasterio.open(path) as src:
        data = src.read(1).astype(np.float64)
        data[data == src.nodata] = np.nan
        return data


class Mosaic:
    """One raster assembled from parts written one at a time, then copied into a Cloud-Optimized GeoTIFF.

    ``with Mosaic(path, rows, cols, transform=..., crs=...) as m: m.write(array, row0, col0)``
    writes each part into a tiled scratch GeoTIFF beside ``path``; leaving the
    block without an error copies it into the COG (:data:`COG_PROFILE`, with
    overviews) through GDAL, whose block cache (:data:`MOSAIC_CACHE_BYTES`)
    bounds the memory whatever the raster's size. The COG appears under
    ``path`` only when complete.
    """

    def __init__(self, path, rows, cols, *, transform, crs, description=None, units=None):
        self.path = Path(path)
        self.scratch = self.path.with_name(f".{self.path.stem}.scratch.tif")
        self.shape = (rows, cols)
        self.transform, self.crs = transform, crs
        self.description, self.units = description, units
        self._env = None
        self._dst = None

    def __enter__(self):
        self._env = rasterio.Env(GDAL_CACHEMAX=MOSAIC_CACHE_BYTES, GDAL_NUM_THREADS="ALL_CPUS")
        self._env.__enter__()
        self._dst = rasterio.open(self.scratch, "w", driver="GTiff", height=self.shape[0], width=self.shape[1],
                                  count=1, dtype="float32", nodata=NODATA, transform=self.transform, crs=self.crs,
                                  tiled=True, blockxsize=256, blockysize=256, compress="zstd", predictor=3,
                                  BIGTIFF="IF_SAFER", sparse_ok=True)
        return self

    def write(self, array, row0, col0):
        """Put ``array`` (NaN = nodata) at cell (row0, col0) of the mosaic."""
        data = np.where(np.isnan(array), NODATA, array).astype(np.float32)
        self._dst.write(data, 1, window=Window(col0, row0, data.shape[1], data.shape[0]))

    def __exit__(self, kind, exc, tb):
        try:
            self._dst.close()
            if kind is None:
                if self.description:
                    with rasterio.open(self.scratch, "r+") as dst:
                        dst.set_band_description(1, self.description)
                        if self.units:
                            dst.set_band_unit(1, self.units)
                            dst.update_tags(1, units=self.units)
                opts = {k: v for k, v in COG_PROFILE.items() if k not in ("driver", "dtype", "count", "nodata")}
                with atomic_path(self.path) as tmp:
                    rasterio.shutil.copy(self.scratch, tmp, driver="COG", NUM_THREADS="ALL_CPUS",
                                         BIGTIFF="IF_SAFER", **opts)
        finally:
            self.scratch.unlink(missing_ok=True)
            self._env.__exit__(kind, exc, tb)
        return False
