"""The raster grid: values, the mask of cells inside the landscape, and geo-reference."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from affine import Affine

from .errors import InputError

__all__ = ["Grid"]


@dataclass(eq=False)
class Grid:
    """A single-band raster held in memory.

    Parameters
    ----------
    values : ndarray, shape (rows, cols)
        Cell values: float64, or int64 for exact integer labels (patch rasters).
    mask : ndarray of bool, shape (rows, cols)
        True where a cell is inside the landscape (not nodata, finite).
    transform : affine.Affine
        Map coordinates of the upper-left corner of cell (row, col) are
        ``(c + a * col, f + e * row)``. Rotated grids are not supported.
    crs : object or None
        The coordinate reference system as given by the reader (a
        ``rasterio.crs.CRS`` when read from a file), or None.
    source : str
        Where the values came from, used in error messages.
    nodata : float or None
        The nodata value of the source file, if any.
    aligned : dict or None
        When the values were warped from another grid: the source, the
        method and both grids (for the manifest).
    """

    values: np.ndarray
    mask: np.ndarray
    transform: Affine = field(default_factory=Affine.identity)
    crs: object = None
    source: str = "array"
    nodata: float | None = None
    aligned: dict | None = None

    def __post_init__(self):
        values = np.asarray(self.values)
        self.values = values if values.dtype == np.int64 else values.astype(np.float64, copy=False)
        self.mask = np.asarray(self.mask, dtype=bool)
        if self.values.ndim != 2:
            raise InputError(
                f"{self.source}: expected a 2-D raster, got an array of shape {self.values.shape}."
            )
        if self.mask.shape != self.values.shape:
            raise InputError(
                f"{self.source}: mask shape {self.mask.shape} differs from the values' "
                f"shape {self.values.shape}."
            )
        t = self.transform
        if t.b != 0 or t.d != 0:
            raise InputError(
                f"{self.source}: the grid is rotated or sheared (transform {tuple(t)[:6]}); "
                "warp it to a north-up grid first (for example with gdalwarp)."
            )
        if not (np.isfinite(t.a) and np.isfinite(t.e) and t.a != 0 and t.e != 0):
            raise InputError(
                f"{self.source}: the transform gives cells of {abs(t.a):g} x {abs(t.e):g} map units; "
                "cell width and height must be finite and non-zero. Check the raster's geo-reference."
            )

    @classmethod
    def from_array(cls, values, *, cell_size=1.0, mask=None, origin=(0.0, 0.0), crs=None):
        """Make a grid from an array, for use from Python without files.

        Parameters
        ----------
        values : array_like, shape (rows, cols)
        cell_size : float or (float, float)
            Cell width and height in map units; a single number for square cells.
        mask : array_like of bool, optional
            Cells inside the landscape. Default: the finite cells.
        origin : (float, float)
            Map coordinates (x, y) of the upper-left corner.

        Examples
        --------
        >>> g = Grid.from_array([[1.0, 2.0, 1.0]], cell_size=10)
        >>> g.cell_size
        (10.0, 10.0)
        """
        if hasattr(values, "dims") and hasattr(values, "coords"):     # an xarray object: keep its georeferencing
            raise InputError("Grid.from_array got an xarray object, whose CRS and transform it would drop; use "
                             "Grid.from_xarray(data_array) instead.")
        values = np.asarray(values, dtype=np.float64)
        width, height = (cell_size, cell_size) if np.isscalar(cell_size) else cell_size
        if not (np.isfinite(width) and np.isfinite(height) and width > 0 and height > 0):
            raise InputError(f"cell_size must be positive map lengths (width, height); got {cell_size!r}.")
        if mask is None:
            mask = np.isfinite(values)
        transform = Affine(float(width), 0.0, origin[0], 0.0, -float(height), origin[1])
        return cls(values, mask, transform, crs)

    @classmethod
    def from_xarray(cls, data, *, mask=None):
        """A grid from a 2-D DataArray with a CRS and a transform (rioxarray); see
        :func:`landflow.io.xarray.grid_from_xarray`. Needs the ``xarray`` extra.

        Examples
        --------
        >>> import numpy as np, xarray as xr, rioxarray
        >>> da = xr.DataArray(np.ones((2, 3)), dims=("y", "x"),
        ...                   coords={"y": [15.0, 5.0], "x": [5.0, 15.0, 25.0]}).rio.write_crs("EPSG:32632")
        >>> Grid.from_xarray(da).cell_size
        (10.0, 10.0)
        """
        from .io.xarray import grid_from_xarray    # the I/O layer reads the georeferencing (rioxarray)
        return grid_from_xarray(data, mask=mask)

    @property
    def shape(self):
        return self.values.shape

    @property
    def cell_size(self):
        """Cell (width, height) in map units, both positive."""
        return abs(self.transform.a), abs(self.transform.e)

    @property
    def is_geographic(self):
        """True when the CRS is geographic (longitude/latitude in degrees)."""
        return self.crs is not None and bool(getattr(self.crs, "is_geographic", False))

    def cell_lengths(self):
        """Centre-to-centre lengths between neighbouring cells, per row, in metres (or map units).

        Returns
        -------
        east_west : ndarray, shape (rows,)
            Distance from a cell's centre to its east neighbour's, in each row.
        north_south : ndarray, shape (rows - 1,)
            Distance from a centre in row r to the one below it in row r + 1.
        diagonal : ndarray, shape (rows - 1,)
            Diagonal between rows r and r + 1: ``hypot(north_south[r],
            (east_west[r] + east_west[r + 1]) / 2)``, from the local lengths.

        Notes
        -----
        In a projected CRS every row has the cell width and height. In a
        geographic CRS the lengths are geodesic distances on the CRS's
        ellipsoid (``pyproj.Geod.inv``, Karney 2013, "Algorithms for
        geodesics", J. Geodesy 87:43, doi:10.1007/s00190-012-0578-z): east-west
        along a parallel between adjacent centres, north-south along a
        meridian. Cost: O(rows).
        """
        rows = self.shape[0]
        width, height = self.cell_size
        if not self.is_geographic:
            ew = np.full(rows, width)
            ns = np.full(max(rows - 1, 0), height)
        else:
            from pyproj import CRS
            crs = self.crs
            geod = CRS.from_user_input(crs.to_wkt() if hasattr(crs, "to_wkt") else crs).get_geod()
            _, lat = self.xy(np.arange(rows), 0)
            lat = np.asarray(lat, dtype=float)
            zeros = np.zeros(rows)
            _, _, ew = geod.inv(zeros, lat, zeros + width, lat)
            _, _, ns = geod.inv(zeros[:-1], lat[:-1], zeros[:-1], lat[1:])
            ew, ns = np.asarray(ew, dtype=float), np.asarray(ns, dtype=float)
        diagonal = np.hypot(ns, (ew[:-1] + ew[1:]) / 2.0)
        return ew, ns, diagonal

    def cell_size_metres(self):
        """Cell (width, height) in metres at the grid's middle row (the cell size itself when projected)."""
        if not self.is_geographic:
            return self.cell_size
        ew, ns, _ = self.cell_lengths()
        mid = self.shape[0] // 2
        return float(ew[mid]), float(ns[min(mid, ns.size - 1)]) if ns.size else float("nan")

    def xy(self, row, col):
        """Map coordinates of the centre of cell(s) (row, col)."""
        t = self.transform
        x = t.c + t.a * (np.asarray(col) + 0.5)
        y = t.f + t.e * (np.asarray(row) + 0.5)
        return x, y

    def rowcol(self, x, y):
        """Row and column of the cell(s) holding map point(s) (x, y); may be out of range."""
        t = self.transform
        col = (np.asarray(x, dtype=float) - t.c) / t.a
        row = (np.asarray(y, dtype=float) - t.f) / t.e
        return np.floor(row).astype(np.int64), np.floor(col).astype(np.int64)

    def where(self, row, col):
        """A phrase locating a cell for error messages: row/col and map coordinates."""
        x, y = self.xy(row, col)
        return f"row {row}, col {col} (x={x:.10g}, y={y:.10g})"

    def same_grid(self, other):
        """Describe how `other` differs from this grid, or return None when they match."""
        diffs = []
        if self.shape != other.shape:
            diffs.append(f"shape {other.shape} instead of {self.shape}")
        if not self.transform.almost_equals(other.transform, precision=1e-9 * max(self.cell_size)):
            diffs.append(f"transform {tuple(other.transform)[:6]} instead of {tuple(self.transform)[:6]}")
        if (self.crs is None) != (other.crs is None) or (
            self.crs is not None and self.crs != other.crs
        ):
            diffs.append(f"CRS {_crs_name(other.crs)} instead of {_crs_name(self.crs)}")
        return "; ".join(diffs) or None


def _crs_name(crs):
    if crs is None:
        return "none"
    to_string = getattr(crs, "to_string", None)
    return to_string() if to_string else str(crs)
