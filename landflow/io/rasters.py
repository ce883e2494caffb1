"""Read and write GeoTIFF (and any single-band raster GDAL reads)."""

from __future__ import annotations

import numpy as np
import rasterio
from rasterio.errors import RasterioIOError

from ..errors import InputError
from ..grid import Grid
from ._atomic import atomic_path

__all__ = ["read_grid", "read_aligned", "write_cog", "write_geotiff", "COG_PROFILE", "GEOTIFF_PROFILE", "NODATA"]

#: Nodata value of every float raster landflow writes.
NODATA = -9999.0

#: Creation options of every raster landflow writes: a Cloud-Optimized GeoTIFF (GDAL's COG driver) with
#: 256 x 256 internal tiles, overviews down to one tile, deflate compression with the floating-point
#: predictor (PREDICTOR=YES picks predictor 3 for float data). Callers may overlay their own options
#: (``compress="zstd"``, ``resampling="nearest"`` for categorical maps, ...).
COG_PROFILE = {
    "driver": "COG", "dtype": "float32", "count": 1, "nodata": NODATA,
    "blocksize": 256, "compress": "deflate", "predictor": "YES", "level": 6,
    "overviews": "auto", "resampling": "average",
}

#: The former name of :data:`COG_PROFILE`.
GEOTIFF_PROFILE = COG_PROFILE


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
                raw = src.read(1, masked=False)
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


def write_cog(path, array, *, transform, crs, description=None, units=None, **profile):
    """Write a 2-D array as a single-band Cloud-Optimized GeoTIFF (:data:`COG_PROFILE`), atomically.

    Parameters
    ----------
    path : str or Path
    array : ndarray, shape (rows, cols)
        NaN cells are written as the profile's nodata value (:data:`NODATA`).
    transform : affine.Affine
    crs : rasterio CRS, str or None
    description : str, optional
        The band description (what the values are).
    units : str, optional
        The band's unit type (GDAL's ``SetUnitType``), also stored as the band
        metadata item ``units``.
    **profile
        Creation options overlaying :data:`COG_PROFILE`.

    Notes
    -----
    The COG driver only copies a finished dataset, so rasterio builds the
    raster in memory and copies it on close (memory: about twice the array).
    The file appears under its final name only once it is complete
    (a temporary name beside it, then a rename).
    """
    array = np.asarray(array)
    if array.ndim != 2:
        raise InputError(f"{path}: expected a 2-D array to write, got shape {array.shape}.")
    opts = {**COG_PROFILE, "height": array.shape[0], "width": array.shape[1], "transform": transform,
            "crs": crs, **profile}
    data = array.astype(opts["dtype"])
    if np.issubdtype(data.dtype, np.floating) and opts.get("nodata") is not None:
        data = np.where(np.isnan(data), opts["nodata"], data)
    if not np.issubdtype(data.dtype, np.floating) and opts.get("predictor") == "YES":
        opts["predictor"] = "NO"
    with atomic_path(path) as tmp:
        with rasterio.open(tmp, "w", **opts) as dst:
            dst.write(data, 1)
            if description:
                dst.set_band_description(1, description)
            if units:
                dst.set_band_unit(1, units)
                dst.update_tags(1, units=units)


def write_geotiff(path, array, grid, *, description=None, units=None, **profile):
    """Write ``array`` on ``grid`` as a float32 Cloud-Optimized GeoTIFF; see :func:`write_cog`.

    NaN cells are written as :data:`NODATA`; ``profile`` overlays the
    creation options of :data:`COG_PROFILE`.
    """
    array = np.asarray(array)
    if array.shape != grid.shape:
        raise InputError(f"{path}: array of shape {array.shape} does not fit the grid {grid.shape} of {grid.source}.")
    write_cog(path, array, transform=grid.transform, crs=grid.crs, description=description, units=units,
              **profile)
