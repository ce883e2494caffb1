"""Patches from a labelled raster or from points."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError
from .rasters import read_aligned
from .tables import read_csv_text

__all__ = ["Patches", "read_patch_raster", "read_patch_points", "patch_weight_from_raster"]


@dataclass(eq=False)
class Patches:
    """Patch labels on the grid (0 = no patch) and optional per-patch weight.

    Attributes
    ----------
    labels : ndarray of int64, shape of the grid
    weight : dict {patch id: float} or None
        Each patch's weight in the pair sum (population size, area, quality).
    source : str
    names : dict {code: str} or None
        For patches read with text ids, the text of each numeric code used
        inside landflow (codes 1, 2, ... in sorted order of the text); None for
        numeric ids, which are their own codes.
    """

    labels: np.ndarray
    weight: dict | None = None
    source: str = "array"
    names: dict | None = None

    @property
    def ids(self):
        ids = np.unique(self.labels)
        return ids[ids != 0]

    def name_of(self, code):
        """The id a user gave patch ``code``: its text id, or the number itself."""
        if self.names is None:
            return int(code)
        return self.names.get(int(code), int(code))

    @property
    def id_table(self):
        """``{code: id}`` for every patch: the text id for text ids, else the number (for legends and tables)."""
        return {int(c): self.name_of(c) for c in self.ids}


def read_patch_raster(path, grid, *, align=None, record=None):
    """Patch labels from an integer raster on the same grid (0 or nodata = no patch).

    ``align`` ("nearest" or "mode") warps a raster on another grid onto
    ``grid``; see :func:`landflow.io.rasters.read_aligned` (also for ``record``).
    """
    if align == "mean":
        raise InputError(f"{path}: patch labels cannot be averaged; align the patch raster with 'nearest' or "
                         "'mode'.")
    src = read_aligned(path, grid, what="patch raster", integer=True, align=align, record=record)
    values = np.where(src.mask, src.values, 0)
    if np.issubdtype(values.dtype, np.integer):            # read exactly, whatever the size of the labels
        bad = values < 0
    else:
        with np.errstate(invalid="ignore"):
            bad = ~np.isfinite(values) | (values != np.round(values)) | (values < 0) | (np.abs(values) > 2.0 ** 53)
    if bad.any():
        rows, cols = np.nonzero(bad)
        raise InputError(f"{path}: {bad.sum()} cell(s) are not whole non-negative numbers; patch labels "
                         f"must be integers, 0 for no patch (a float raster keeps them exact only up to "
                         f"2^53; store labels as integers). First at {grid.where(rows[0], cols[0])}.")
    return Patches(values.astype(np.int64), None, str(path))


def read_patch_points(path, grid, *, weight_column=None, crs=None):
    """Patches from a CSV of points with columns ``x``, ``y``, ``id`` (map coordinates of the grid's CRS).

    With ``crs`` (anything pyproj reads: "EPSG:4326", WKT, ...), ``x`` and
    ``y`` are in that CRS and are reprojected to the grid's CRS with pyproj
    (for EPSG:4326, x is longitude and y latitude).

    Each point marks the cell it falls in. Several points may share an id
    (one patch of several cells); two different ids in one cell are an error.
    With ``weight_column``, that column gives each patch's weight (a
    finite number >= 0, the same on every point of one id).
    """
    table = read_csv_text(path, "patch points file")
    needed = ["x", "y", "id"] + ([weight_column] if weight_column else [])
    missing = [c for c in needed if c not in table.columns]
    if missing:
        raise InputError(f"{path}: missing column(s) {', '.join(missing)}; found {', '.join(map(str, table.columns))}. "
                         "The points table needs x, y (map coordinates in the raster's CRS) and id (a whole number > 0).")
    for col in needed:
        text = table[col]
        values = pd.to_numeric(text, errors="coerce")
        if values.isna().any():
            line = int(values.isna().to_numpy().argmax()) + 2
            held = text.iloc[line - 2]
            shown = "nothing (a blank value)" if held == "" else repr(held)
            raise InputError(f"{path}, line {line}: column {col!r} holds {shown}, not a number. Fill it in or "
                             "remove the line.")
        table[col] = values
    ids = table["id"].to_numpy()
    bad = (ids != np.round(ids)) | (ids <= 0)
    if bad.any():
        line = int(bad.argmax()) + 2
        raise InputError(f"{path}, line {line}: id {ids[line - 2]:g} is not a whole number > 0.")
    if weight_column:
        weight = table[weight_column].to_numpy()
        bad = ~np.isfinite(weight) | (weight < 0)
        if bad.any():
            line = int(bad.argmax()) + 2
            raise InputError(f"{path}, line {line}: {weight_column!r} is {weight[line - 2]:g}; "
                             "a patch weight must be a finite number >= 0.")
    x, y = table["x"].to_numpy(), table["y"].to_numpy()
    if crs is not None:
        x, y = _reproject_points(x, y, crs, grid, path)
    rows, cols = grid.rowcol(x, y)
    inside = (rows >= 0) & (rows < grid.shape[0]) & (cols >= 0) & (cols < grid.shape[1])
    if not inside.all():
        n = int(np.argmin(inside))
        raise InputError(f"{path}, line {n + 2}: point ({table['x'][n]:g}, {table['y'][n]:g}) with id "
                         f"{ids[n]:g} lies outside the raster {grid.source}. Check its coordinates and CRS.")
    on_nodata = ~grid.mask[rows, cols]
    if on_nodata.any():
        n = int(np.argmax(on_nodata))
        raise InputError(f"{path}, line {n + 2}: point with id {ids[n]:g} falls on a nodata cell of "
                         f"{grid.source} at {grid.where(rows[n], cols[n])}. Move it onto the landscape.")
    labels = np.zeros(grid.shape, dtype=np.int64)
    cell = rows * grid.shape[1] + cols
    frame = pd.DataFrame({"cell": cell, "id": ids.astype(np.int64)})
    clash = frame.groupby("cell")["id"].nunique()
    if (clash > 1).any():
        c = int(clash.index[clash > 1][0])
        r, q = divmod(c, grid.shape[1])
        both = sorted(int(i) for i in frame.loc[frame["cell"] == c, "id"].unique())
        raise InputError(f"{path}: points with different ids {both} fall in the same cell at "
                         f"{grid.where(r, q)}. Merge them into one id or move one of them.")
    labels.reshape(-1)[cell] = ids.astype(np.int64)
    weight = None
    if weight_column:
        per_id = table.groupby("id")[weight_column]
        if (per_id.nunique() > 1).any():
            raise InputError(f"{path}: patch ids with several points must repeat the same {weight_column!r}.")
        weight = {int(k): float(v) for k, v in per_id.first().items()}
    return Patches(labels, weight, str(path))


def _reproject_points(x, y, crs, grid, path):
    from pyproj import CRS, Transformer
    from pyproj.exceptions import CRSError
    try:
        source = CRS.from_user_input(crs)
    except CRSError as exc:
        raise InputError(f"{path}: cannot read the CRS {crs!r} of its points ({exc}); give one such as "
                         "'EPSG:4326'.") from None
    if grid.crs is None:
        raise InputError(f"{path}: the points are in {crs} but the raster {grid.source} has no CRS to "
                         "reproject them to. Give the raster a CRS.")
    move = Transformer.from_crs(source, CRS.from_user_input(grid.crs), always_xy=True)
    return move.transform(x, y)


def patch_weight_from_raster(path, grid, patches, *, align=None, record=None):
    """Weight of each patch as the sum of a raster's values over its cells (``align``: see read_aligned)."""
    src = read_aligned(path, grid, what="patch weight raster", align=align, record=record)
    values = np.where(src.mask, src.values, 0.0)
    bad = ~np.isfinite(values) | (values < 0)
    if bad.any():
        rows, cols = np.nonzero(bad)
        first = "negative" if values[rows[0], cols[0]] < 0 else "not finite"
        raise InputError(f"{path}: weight must be >= 0; first {first} at {grid.where(rows[0], cols[0])}. "
                         "Set cells without a weight to 0 or to the raster's nodata value.")
    ids = patches.ids
    sums = np.bincount(np.searchsorted(ids, patches.labels[patches.labels > 0]),
                       weights=values[patches.labels > 0], minlength=ids.size)
    return {int(i): float(s) for i, s in zip(ids, sums)}
