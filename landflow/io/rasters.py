"""Read and write GeoTIFF (and any single-band raster GDAL reads)."""

from __future__ import annotations

import numpy as np
import rasterio
from rasterio.errors import RasterioIOError

from ..errors import InputError
from ..grid import Grid
from ._atomic import atomic_path

__all__ = ["read_grid", "read_aligned", "ALIGN_METHODS", "write_cog", "write_geotiff", "COG_PROFILE", "GEOTIFF_PROFILE", "NODATA"]

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


def read_grid(path, *, what="raster", integer=False, plain_grid_ok=False):
    """Read band 1 of a raster into a :class:`Grid`.

    Cells equal to the nodata value are outside the landscape; so are
    non-finite cells when the file declares no nodata value.

    Parameters
    ----------
    path : str or Path
    what : str
        What the raster is, for error messages ("resistance raster", ...).
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
        has no georeferencing (unless ``plain_grid_ok``).

    Notes
    -----
    A raster in a geographic CRS (longitude/latitude) is read as it is; the
    graph then measures each row's cell lengths in metres on the ellipsoid
    (:meth:`Grid.cell_lengths`).
    """
    import warnings

    from rasterio.errors import NotGeoreferencedWarning
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            with rasterio.open(path) as src:
                check_header(src, path, what, plain_grid_ok=plain_grid_ok)
                nodata, transform, crs = src.nodata, src.transform, src.crs
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
    if integer and np.issubdtype(raw.dtype, np.integer):
        if raw.dtype == np.uint64 and raw.size and raw.max() > np.iinfo(np.int64).max:
            raise InputError(f"{path}: the {what} holds labels above {np.iinfo(np.int64).max}; landflow keeps "
                             "labels exact up to int64. Renumber them.")
        values = raw.astype(np.int64)
        mask = np.ones(values.shape, bool) if nodata is None or not float(nodata).is_integer() \
            else values != int(nodata)
        return Grid(values, mask, transform, crs, source=str(path), nodata=nodata)
    values, mask = valid_values(raw, nodata)
    return Grid(values, mask, transform, crs, source=str(path), nodata=nodata)


def check_header(src, path, what, *, plain_grid_ok=False):
    """Refuse an open raster landflow cannot read as one landscape band: several bands, or (unless
    ``plain_grid_ok``) no georeferencing at all."""
    if src.count != 1:
        raise InputError(f"{path}: the {what} has {src.count} bands; landflow reads single-band "
                         "rasters. Extract the band you mean (gdal_translate -b N).")
    if src.transform.is_identity and src.crs is None and not plain_grid_ok:
        raise InputError(f"{path}: the {what} has no georeferencing (no transform and no CRS; "
                         f"a {src.driver} file). Give a georeferenced raster such as a GeoTIFF, or "
                         "set 'landscape.plain_grid_ok = true' to read it as a grid of 1 x 1 cells.")


def valid_values(raw, nodata):
    """Band values as float64 and the mask of valid cells: not the nodata value, or finite where the file
    declares no nodata value."""
    values = raw.astype(np.float64)
    if nodata is None:
        return values, np.isfinite(values)
    if np.isnan(nodata):
        return values, ~np.isnan(values)
    return values, values != nodata


#: How another raster may be brought onto the landscape's grid: rasterio.warp resampling of each name.
ALIGN_METHODS = ("nearest", "mode", "mean")


def read_aligned(path, grid, *, what="raster", integer=False, align=None, record=None):
    """Read a raster that must share ``grid``'s shape, transform and CRS, or warp it there when asked.

    Parameters
    ----------
    align : {"nearest", "mode", "mean"} or None
        None refuses a raster on another grid. Otherwise the raster is warped
        onto ``grid`` with ``rasterio.warp.reproject``: ``nearest`` takes the
        source cell under each target cell centre (labels, classes), ``mode``
        the most common source value over the target cell (labels from a finer
        raster), ``mean`` the area-weighted average (rates and probabilities;
        not counts, whose sum changes with the cell size). Target cells with no
        source value are nodata. The returned grid's ``aligned`` attribute
        records what was done.
    record : list, optional
        When given, a warped raster's ``aligned`` record is appended to it.

    Raises
    ------
    InputError
        The raster is on another grid and ``align`` is None, or it has no CRS
        to warp from.
    """
    other = read_grid(path, what=what, integer=integer, plain_grid_ok=True)
    diff = grid.same_grid(other)
    if not diff:
        return other
    if align is None:
        raise InputError(f"{path}: the {what} is not on the grid of {grid.source}: {diff}. "
                         "Resample it onto that grid (same extent, cell size and CRS), or let the study warp it "
                         "(an [alignment] key: 'nearest', 'mode' or 'mean').")
    if align not in ALIGN_METHODS:
        raise InputError(f"{path}: unknown alignment {align!r}; use one of {', '.join(ALIGN_METHODS)}.")
    if (other.crs is None) != (grid.crs is None):
        raise InputError(f"{path}: the {what} or the landscape has no CRS, so one cannot be warped onto the other. "
                         "Give both rasters a CRS.")
    out = _warp(other, grid, align, what)
    if record is not None:
        record.append(out.aligned)
    return out


def _warp(src, grid, align, what):
    from rasterio.warp import Resampling, reproject

    method = {"nearest": Resampling.nearest, "mode": Resampling.mode, "mean": Resampling.average}[align]
    integer = np.issubdtype(src.values.dtype, np.integer)
    if integer:
        fill = np.iinfo(np.int64).min
        source = np.where(src.mask, src.values, fill).astype(np.int64)
        target = np.full(grid.shape, fill, dtype=np.int64)
    else:
        fill = np.nan
        source = np.where(src.mask, src.values, np.nan)
        target = np.full(grid.shape, np.nan)
    reproject(source, target, src_transform=src.transform, src_crs=src.crs, src_nodata=fill,
              dst_transform=grid.transform, dst_crs=grid.crs, dst_nodata=fill, resampling=method)
    mask = target != fill if integer else np.isfinite(target)
    return Grid(target, mask, grid.transform, grid.crs, source=src.source, nodata=None if not integer else fill,
                aligned={"input": src.source, "what": what, "method": align,
                   "from": {"shape": list(src.shape), "cell_size": list(src.cell_size),
                            "crs": src.crs.to_string() if src.crs is not None else None},
                   "to": {"shape": list(grid.shape), "cell_size": list(grid.cell_size)}})


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
    (a temporary name beside it, then a rename). GDAL compresses the blocks
    on one thread per core (:func:`landflow.solve.compute_threads`), which
    gives the same bytes as one thread: 0.21 s -> 0.14 s for a million cells
    on two cores.
    """
    from ..solve import compute_threads         # how many threads landflow may use
    array = np.asarray(array)
    if array.ndim != 2:
        raise InputError(f"{path}: expected a 2-D array to write, got shape {array.shape}.")
    opts = {**COG_PROFILE, "height": array.shape[0], "width": array.shape[1], "transform": transform,
            "crs": crs, "num_threads": compute_threads(), **profile}
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
