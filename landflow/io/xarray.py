"""xarray in and out: a georeferenced DataArray (rioxarray) as a Grid, and per-cell results back as DataArrays.

Needs the ``xarray`` extra (``pip install landflow[xarray]``: xarray and rioxarray).
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..grid import Grid

__all__ = ["grid_from_xarray", "to_xarray"]


def _rioxarray():
    try:
        import rioxarray  # noqa: F401  (registers the .rio accessor)
    except ImportError:
        raise InputError("reading and writing xarray DataArrays needs rioxarray; install landflow[xarray] "
                         "(pip install 'landflow[xarray]').") from None


def grid_from_xarray(data, *, mask=None):
    """A :class:`Grid` from a 2-D DataArray with a CRS and a transform (as rioxarray reads them).

    Parameters
    ----------
    data : xarray.DataArray
        2-D (y, x), or 3-D with a single band. Its CRS and transform are read
        with rioxarray (``data.rio.crs``, ``data.rio.transform()``).
    mask : array_like of bool, optional
        Cells inside the landscape. Default: finite cells that are not the
        DataArray's nodata value (``data.rio.nodata``).

    Raises
    ------
    InputError
        Not a DataArray, more than one band, or no CRS.
    """
    _rioxarray()
    import xarray as xr

    if not isinstance(data, xr.DataArray):
        raise InputError(f"Grid.from_xarray takes an xarray.DataArray, got {type(data).__name__}; for a Dataset "
                         "pick the variable (ds['resistance']).")
    name = data.name or "DataArray"
    if data.ndim == 3 and data.shape[0] == 1:
        data = data.squeeze(data.dims[0], drop=True)
    if data.ndim != 2:
        raise InputError(f"DataArray '{name}': expected a 2-D (y, x) array or a single band, got dims "
                         f"{data.dims}. Select one band (da.sel(band=1)).")
    crs = data.rio.crs
    if crs is None:
        raise InputError(f"DataArray '{name}' has no CRS; set it with da.rio.write_crs('EPSG:...') so cell "
                         "lengths are known.")
    values = np.asarray(data.values, dtype=np.float64)
    nodata = data.rio.nodata
    if mask is None:
        mask = np.isfinite(values)
        if nodata is not None and np.isfinite(nodata):
            mask &= values != nodata
    return Grid(values, np.asarray(mask, dtype=bool), data.rio.transform(), crs, source=f"DataArray '{name}'",
                nodata=nodata)


def to_xarray(values, transform, crs, *, name=None, units=None):
    """A georeferenced DataArray (y, x) of a 2-D array, with cell-centre coordinates and the CRS written by rioxarray.

    ``units`` goes into the attribute ``units``; NaN marks cells outside the landscape.
    """
    _rioxarray()
    import xarray as xr

    values = np.asarray(values)
    rows, cols = values.shape
    x = transform.c + transform.a * (np.arange(cols) + 0.5)
    y = transform.f + transform.e * (np.arange(rows) + 0.5)
    attrs = {"units": units} if units else {}
    out = xr.DataArray(values, coords={"y": y, "x": x}, dims=("y", "x"), name=name, attrs=attrs)
    if crs is not None:
        out = out.rio.write_crs(crs.to_wkt() if hasattr(crs, "to_wkt") else crs)
    return out.rio.write_transform(transform)
