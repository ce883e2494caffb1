"""Read and write GeoTIFF (and any single-band raster GDAL reads)."""

from __future__ import annotations

import numpy as np
import rasterio
from rasterio.errors import RasterioIOError

from ..errors import InputError
from ..grid import Grid
from ._atomic import atomic_path

__all__ = ["read_grid", "read_aligned", "write_geotiff", "GEOTIFF_PROFILE", "NODATA"]

#: Nodata value of every float raster landflow writes.
NODATA = -9999.0

#: Creation options of every GeoTIFF landflow writes; callers may overlay their own.
GEOTIFF_PROFILE = {
    "driver": "GTiff", "dtype": "float32", "count": 1, "nodata": NODATA,
    "tiled": True, "blockxsize": 256, "blockysize": 256,
    "compress": "deflate", "predictor": 3, "zlevel": 6,
}


def read_grid(path, *, what="raster", allow_geographic=False, integer=False, plain_grid_ok=False):
    """Read band 1 of a raster into a :class:`Grid`.

    Cells equal to the nodata value are outside the landscape; so are
    non-finite cells when the file declares no nodata value.

    Parameters
    ----------
    path : str or Path
    what : str
        What the raster is, for error messages ("resistance raster", ...).
    allow_geographic : bool
        Accept a geographic CRS (degrees). Off by default: distances in
        degrees are not metres, and the edge rule needs lengths.
    integer : bool
        Keep an integer raster's values exact (int64) instead of reading them
        through float64, which merges whole numbers above 2^53 (patch labels).
    plain_grid_ok : bool
        Accept a raster without georeferencing (no transform and no CRS, such
        as a PNG); its cells are then 1 x 1 map units.

    Raises
    ------
    InputError
        The file is missing, unreadable or damaged, has more than one band,
        has no georeferencing (unless ``plain_grid_ok``), or is in a
        geographic CRS.
    """
    import warnings

    from rasterio.errors import NotGeoreferencedWarning
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            with rasterio.open(path) as src:
                if src.count != 1:
                    raise InputError(f"{path}: the {what} has {src.count} bands; landflow reads single-band "
                                     "rasters. Extract the band you mean (gdal_translate -b N).")
                nodata, transform, crs = src.nodata, src.transform, src.crs
                if transform.is_identity and crs is None and not plain_grid_ok:
                    raise InputError(f"{path}: the {what} has no georeferencing (no transform and no CRS; "
                                     f"a {src.driver} file). Give a georeferenced raster such as a GeoTIFF, or "
                                     "set 'landscape.plain_grid_ok = true' to read it as a grid of 1 x 1 cells.")
                try:
                    raw = src.read(1, masked=False)
                except RasterioIOError as exc:       # opened, but its data cannot be decoded
                    raise InputError(f"cannot read the {what} '{path}': the file is damaged or truncated "
                                     f"(GDAL: {str(exc).rstrip('. ')}). The file may be incomplete; export it "
                                     "again.") from None
    except RasterioIOError as exc:
        reason = str(exc).rstrip(". ")                  # GDAL's messages often end with a full stop
        if "previous exception" in reason.lower() or "read failed" in reason.lower():
            raise InputError(f"cannot read the {what} '{path}': the file is damaged or truncated (GDAL: "
                             f"{reason}). The file may be incomplete; export it again.") from None
        raise InputError(f"cannot read the {what} '{path}': {reason}. Check the path "
                         "(relative paths in a study are relative to the study file).") from None
    except InputError:
        raise
    except Exception as exc:     # GDAL's errors while decoding a damaged or truncated file
        reason = str(exc).rstrip(". ") or type(exc).__name__
        if "see previous exception" in reason.lower():
            reason = "the file is damaged or truncated"
        raise InputError(f"cannot read the {what} '{path}': {reason}. The file may be damaged or incomplete; "
                         "export it again.") from None
    if crs is not None and crs.is_geographic and not allow_geographic:
        raise InputError(f"{path}: the {what} is in a geographic CRS ({crs.to_string()}) whose units "
                         "are degrees, not lengths. Reproject it to a projected CRS in metres.")
    if integer and np.issubdtype(raw.dtype, np.integer):
        if raw.dtype == np.uint64 and raw.size and raw.max() > np.iinfo(np.int64).max:
            raise InputError(f"{path}: the {what} holds labels above {np.iinfo(np.int64).max}; landflow keeps "
                             "labels exact up to int64. Renumber them.")
        values = raw.astype(np.int64)
        mask = np.ones(values.shape, bool) if nodata is None or not float(nodata).is_integer() \
            else values != int(nodata)
        return Grid(values, mask, transform, crs, source=str(path), nodata=nodata)
    values = raw.astype(np.float64)
    if nodata is None:
        mask = np.isfinite(values)
    elif np.isnan(nodata):
        mask = ~np.isnan(values)
    else:
        mask = values != nodata
    return Grid(values, mask, transform, crs, source=str(path), nodata=nodata)


def read_aligned(path, grid, *, what="raster", integer=False):
    """Read a raster that must share ``grid``'s shape, transform and CRS."""
    other = read_grid(path, what=what, allow_geographic=True, integer=integer, plain_grid_ok=True)
    diff = grid.same_grid(other)
    if diff:
        raise InputError(f"{path}: the {what} is not on the grid of {grid.source}: {diff}. "
                         "Resample it onto that grid (same extent, cell size and CRS).")
    return other


def write_geotiff(path, array, grid, **profile):
    """Write ``array`` on ``grid`` as a compressed float32 GeoTIFF (:data:`GEOTIFF_PROFILE`).

    The file is tiled in 256 x 256 blocks when the grid holds at least one
    block, striped otherwise. NaN cells are written as :data:`NODATA`.
    ``profile`` overlays the creation options. The file appears under its
    final name only once it is complete.
    """
    array = np.asarray(array)
    if array.shape != grid.shape:
        raise InputError(f"{path}: array of shape {array.shape} does not fit the grid {grid.shape} of {grid.source}.")
    opts = {**GEOTIFF_PROFILE, "height": grid.shape[0], "width": grid.shape[1],
            "transform": grid.transform, "crs": grid.crs, **profile}
    if grid.shape[0] < opts["blockysize"] or grid.shape[1] < opts["blockxsize"]:
        opts["tiled"] = False
        opts.pop("blockxsize"), opts.pop("blockysize")
    data = array.astype(opts["dtype"])
    if np.issubdtype(data.dtype, np.floating) and opts["nodata"] is not None:
        data = np.where(np.isnan(data), opts["nodata"], data)
    with atomic_path(path) as tmp:
        with rasterio.open(tmp, "w", **opts) as dst:
            dst.write(data, 1)
