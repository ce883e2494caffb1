"""Vector features (GeoPackage, GeoJSON, Shapefile, FlatGeobuf): reading, reprojecting, and patches from them.

Reading goes through geopandas with the pyogrio engine; reprojection through
pyproj (``GeoDataFrame.to_crs``); polygons become cells with
``rasterio.features.rasterize``. :func:`read_features` and
:func:`features_in_crs` are general helpers for any layer (sites, lines, ...);
:func:`patches_from_features` turns point and polygon features into
:class:`~landflow.io.sites.Patches` on a grid.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError

__all__ = ["read_features", "features_in_crs", "patches_from_features", "read_patch_features",
           "VECTOR_SUFFIXES"]

#: File endings read as vector layers (anything else GDAL reads works too).
VECTOR_SUFFIXES = (".gpkg", ".geojson", ".json", ".shp", ".fgb")


def _where(source, layer):
    return f"{source}" + (f", layer '{layer}'" if layer else "")


def read_features(path, *, layer=None, columns=None, what="vector file"):
    """Read one layer of a vector file as a GeoDataFrame indexed by feature id (FID).

    Parameters
    ----------
    path : str or Path
    layer : str or None
        The layer to read; None reads the only layer, and refuses a file of
        several layers (naming them).
    columns : list of str, optional
        Attribute columns that must exist; a missing one is an error listing
        the columns found.
    what : str
        What the file is, for messages ("patch features", "road lines", ...).

    Raises
    ------
    InputError
        The file is missing or unreadable, the layer does not exist or must be
        chosen, or a column is missing.
    """
    import pyogrio
    from pyogrio.errors import DataLayerError, DataSourceError

    path = Path(path)
    try:
        layers = [str(name) for name, _ in pyogrio.list_layers(path)]
    except (DataSourceError, OSError) as exc:
        reason = str(exc).strip().rstrip(".")
        raise InputError(f"cannot read the {what} '{path}': {reason}. Check the path (relative paths in a study "
                         "are relative to the study file) and that it is a GeoPackage, GeoJSON, Shapefile or "
                         "FlatGeobuf.") from None
    if layer is None and len(layers) > 1:
        raise InputError(f"{path}: the {what} holds {len(layers)} layers ({', '.join(layers)}); say which one "
                         "to read (the 'layer' key).")
    if layer is not None and layer not in layers:
        raise InputError(f"{path}: no layer '{layer}' in the {what}; its layers are {', '.join(layers)}. "
                         "Fix the 'layer' key.")
    try:
        import geopandas as gpd
        frame = gpd.read_file(path, layer=layer, engine="pyogrio", fid_as_index=True)
    except (DataSourceError, DataLayerError, OSError) as exc:
        raise InputError(f"cannot read the {what} '{path}': {str(exc).strip().rstrip('.')}.") from None
    missing = [c for c in (columns or []) if c not in frame.columns]
    if missing:
        found = [c for c in frame.columns if c != frame.geometry.name]
        raise InputError(f"{_where(path, layer)}: missing column(s) {', '.join(map(repr, missing))} in the {what}; "
                         f"found {', '.join(map(repr, found)) or 'no attribute columns'}. Fix the column key or "
                         "add the column.")
    frame.attrs["source"], frame.attrs["layer"] = str(path), layer
    return frame


def features_in_crs(frame, crs, *, what="features"):
    """Reproject a GeoDataFrame to ``crs`` with pyproj; refuse features without a CRS.

    ``frame.attrs`` may hold ``source`` and ``layer`` for messages.
    """
    where = _where(frame.attrs.get("source", "GeoDataFrame"), frame.attrs.get("layer"))
    if frame.crs is None:
        raise InputError(f"{where}: the {what} have no CRS, so they cannot be placed on the raster. Set the "
                         "layer's CRS (in a GIS, or GeoDataFrame.set_crs in Python) to the one its coordinates "
                         "are in.")
    if crs is None:
        raise InputError(f"{where}: the raster has no CRS, so the {what} cannot be placed on it. Give the "
                         "raster a CRS.")
    attrs = dict(frame.attrs)
    from pyproj import CRS
    target = CRS.from_user_input(crs.to_wkt() if hasattr(crs, "to_wkt") else crs)
    out = frame if frame.crs == target else frame.to_crs(target)
    out.attrs.update(attrs)
    return out


def _plain(value):
    """A numpy scalar as the Python value it holds (for readable messages)."""
    return value.item() if isinstance(value, np.generic) else value


def _feature(fid, ident):
    return f"feature {fid} (id {_plain(ident)!r})"


def patch_codes(ids, *, where, id_column):
    """Numeric patch codes for an id column: whole numbers > 0 kept as they are, text numbered 1, 2, ... in
    sorted order. Returns ``(codes, names)``, names a dict code -> text or None for numeric ids."""
    ids = pd.Series(ids)
    if ids.isna().any():
        fid = ids.index[ids.isna().to_numpy()][0]
        raise InputError(f"{where}: feature {fid} has no value in the id column {id_column!r}. Give every "
                         "feature an id.")
    if pd.api.types.is_numeric_dtype(ids) and not pd.api.types.is_bool_dtype(ids):
        values = ids.to_numpy(dtype=float)
        bad = (values != np.round(values)) | (values <= 0)
        if bad.any():
            fid = ids.index[bad][0]
            raise InputError(f"{where}: feature {fid} has id {_plain(ids[fid])!r} in {id_column!r}; numeric ids must be "
                             "whole numbers > 0 (or use text ids).")
        return ids.to_numpy().astype(np.int64), None
    text = ids.astype(str).str.strip()
    empty = text == ""
    if empty.any():
        raise InputError(f"{where}: feature {ids.index[empty.to_numpy()][0]} has an empty id in {id_column!r}. "
                         "Give every feature an id.")
    names = sorted(text.unique())
    code_of = {name: i + 1 for i, name in enumerate(names)}
    return text.map(code_of).to_numpy(np.int64), {code: name for name, code in code_of.items()}


def patches_from_features(frame, grid, *, id_column="id", weight_column=None, all_touched=False):
    """Patches on ``grid`` from point and polygon features (a GeoDataFrame).

    A point marks the cell it falls in; a polygon the cells whose centres lie
    inside it, or every cell it touches with ``all_touched`` (for thin
    polygons such as ditches or hedges). Multi-part features and several
    features with one id make one patch. Features are reprojected to the
    grid's CRS with pyproj first.

    Parameters
    ----------
    frame : geopandas.GeoDataFrame
        ``frame.attrs["source"]`` / ``["layer"]`` name the file in messages.
    grid : Grid
        The landscape; it must have a CRS.
    id_column : str
        Patch ids: whole numbers > 0, or text. Text ids get numeric codes
        1, 2, ... in sorted order, used inside landflow; ``Patches.names`` maps
        each code back to its text.
    weight_column : str, optional
        Each patch's weight (finite, >= 0, equal on all features of one id).
    all_touched : bool
        Polygons claim every cell they touch, not only cells whose centre is inside.

    Returns
    -------
    Patches

    Raises
    ------
    InputError
        No CRS; a missing column; an empty or invalid geometry; a line
        geometry; a feature outside the raster, covering no cell or lying
        wholly on nodata; one cell claimed by two ids; a bad id or weight.
        Each message names the file, the layer and the feature (FID and id).

    Notes
    -----
    Cost: one rasterisation of the union of each id's polygons, two passes
    over the grid, plus a point-in-cell lookup for points.
    """
    import shapely
    from rasterio.features import MergeAlg, rasterize

    from .sites import Patches

    source, layer = frame.attrs.get("source", "GeoDataFrame"), frame.attrs.get("layer")
    where = _where(source, layer)
    missing = [c for c in [id_column] + ([weight_column] if weight_column else []) if c not in frame.columns]
    if missing:
        found = [c for c in frame.columns if c != frame.geometry.name]
        raise InputError(f"{where}: missing column(s) {', '.join(map(repr, missing))}; found "
                         f"{', '.join(map(repr, found)) or 'no attribute columns'}. Fix 'id_column' / "
                         "'weight_column' or add the column.")
    if len(frame) == 0:
        raise InputError(f"{where}: the layer holds no features; patches need at least two.")
    geoms = frame.geometry
    empty = geoms.isna().to_numpy() | shapely.is_empty(geoms.to_numpy())
    if empty.any():
        fid = frame.index[empty][0]
        raise InputError(f"{where}: {_feature(fid, frame[id_column][fid])} has an empty geometry. Delete the "
                         "feature or draw its geometry.")
    valid = shapely.is_valid(geoms.to_numpy())
    if not valid.all():
        fid = frame.index[~valid][0]
        reason = shapely.is_valid_reason(geoms[fid])
        raise InputError(f"{where}: {_feature(fid, frame[id_column][fid])} has an invalid geometry ({reason}). "
                         "Repair it (a GIS 'fix geometries' tool, or shapely.make_valid).")
    kinds = geoms.geom_type.to_numpy()
    lines = ~np.isin(kinds, ["Point", "MultiPoint", "Polygon", "MultiPolygon"])
    if lines.any():
        fid = frame.index[lines][0]
        raise InputError(f"{where}: {_feature(fid, frame[id_column][fid])} is a {kinds[lines][0]}; patches are "
                         "points or polygons. Buffer lines into polygons first.")
    codes, names = patch_codes(frame[id_column], where=where, id_column=id_column)
    frame = features_in_crs(frame, grid.crs, what="patch features")
    geoms = frame.geometry.to_numpy()

    t = grid.transform
    rows, cols = grid.shape
    x0, x1 = sorted((t.c, t.c + t.a * cols))
    y0, y1 = sorted((t.f, t.f + t.e * rows))
    inside = shapely.intersects(geoms, shapely.box(x0, y0, x1, y1))
    if not inside.all():
        fid = frame.index[~inside][0]
        raise InputError(f"{where}: {_feature(fid, frame[id_column][fid])} lies outside the raster "
                         f"{grid.source}. Check its coordinates and the layer's CRS, or remove it.")

    # points: the cell each falls in (as for CSV points); polygons: rasterised per id
    claims = np.zeros(grid.shape, dtype=np.int64)
    labels = np.zeros(grid.shape, dtype=np.int64)
    first_fid = {}
    for fid, code in zip(frame.index, codes):
        first_fid.setdefault(int(code), fid)
    is_point = np.isin(kinds, ["Point", "MultiPoint"])
    shapes = []
    for code in np.unique(codes):
        these = codes == code
        pts = geoms[these & is_point]
        if pts.size:
            xy = shapely.get_coordinates(pts)
            r, c = grid.rowcol(xy[:, 0], xy[:, 1])
            ok = (r >= 0) & (r < rows) & (c >= 0) & (c < cols)
            cells = np.unique(r[ok] * cols + c[ok])
            claims.reshape(-1)[cells] += 1
            labels.reshape(-1)[cells] = code
        polys = geoms[these & ~is_point]
        if polys.size:
            shapes.append((shapely.union_all(polys), int(code)))
    if shapes:
        counts = rasterize(((g, 1) for g, _ in shapes), out_shape=grid.shape, transform=t, fill=0,
                           all_touched=all_touched, merge_alg=MergeAlg.add, dtype="int32")
        burnt = rasterize(((g, i + 1) for i, (g, _) in enumerate(shapes)), out_shape=grid.shape, transform=t,
                          fill=0, all_touched=all_touched, dtype="int32")
        claims += counts
        poly_codes = np.array([0] + [c for _, c in shapes], dtype=np.int64)
        labels = np.where(burnt > 0, poly_codes[burnt], labels)
    shown = (lambda c: names[c]) if names else (lambda c: c)
    if (claims > 1).any():
        r, c = (int(v[0]) for v in np.nonzero(claims > 1))
        xa, xb = sorted((t.c + t.a * c, t.c + t.a * (c + 1)))
        ya, yb = sorted((t.f + t.e * r, t.f + t.e * (r + 1)))
        cell = shapely.box(xa, ya, xb, yb)
        both = sorted({shown(int(k)) for k, g in zip(codes, geoms) if shapely.intersects(g, cell)}, key=str)
        raise InputError(f"{where}: one cell is claimed by different ids {both} at {grid.where(r, c)}. Merge "
                         "the features into one id, or move or shrink one of them.")
    found = np.unique(labels[labels > 0])
    for code in np.unique(codes):
        fid = first_fid[int(code)]
        if code not in found:
            hint = "" if all_touched else " Set 'all_touched = true' to claim every cell a thin polygon touches."
            raise InputError(f"{where}: {_feature(fid, shown(int(code)))} covers no cell centre of the raster "
                             f"{grid.source}.{hint}")
        if not grid.mask[labels == code].any():
            raise InputError(f"{where}: {_feature(fid, shown(int(code)))} lies wholly on nodata cells of "
                             f"{grid.source}. Move it onto the landscape or fix the raster.")
    weight = feature_weights(frame, weight_column, codes, where=where, id_column=id_column, shown=shown) \
        if weight_column else None
    return Patches(labels, weight, where, names=names)


def feature_weights(frame, weight_column, codes, *, where, id_column, shown, kind="patch"):
    """``{code: weight}`` from a weight column of features (patches, or a network's zones).

    Each weight must be a finite number >= 0, and the features of one id must repeat the same
    weight; ``codes`` are the features' numeric codes (:func:`patch_codes`), ``shown`` turns a code
    back into the id a user gave, and ``kind`` names what is weighed in messages.
    """
    values = pd.to_numeric(frame[weight_column], errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(values) | (values < 0)
    if bad.any():
        fid = frame.index[bad][0]
        raise InputError(f"{where}: {_feature(fid, frame[id_column][fid])} has {weight_column!r} = "
                         f"{_plain(frame[weight_column][fid])!r}; a {kind} weight must be a finite number >= 0.")
    per_id = pd.Series(values).groupby(codes)
    if (per_id.nunique() > 1).any():
        code = int(per_id.nunique().index[(per_id.nunique() > 1).to_numpy()][0])
        raise InputError(f"{where}: the features of {kind} {shown(code)!r} give different {weight_column!r}; "
                         f"features of one {kind} must repeat the same weight.")
    return {int(k): float(v) for k, v in per_id.first().items()}


def read_patch_features(path, grid, *, layer=None, id_column="id", weight_column=None, all_touched=False):
    """Patches from one layer of a vector file; see :func:`patches_from_features`."""
    frame = read_features(path, layer=layer, what="patch features")
    return patches_from_features(frame, grid, id_column=id_column, weight_column=weight_column,
                                 all_touched=all_touched)
