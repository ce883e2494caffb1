"""Patches and sites from vector files (GeoPackage, GeoJSON, Shapefile, FlatGeobuf) through geopandas."""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from .sites import Patches

__all__ = ["read_patch_vector", "patches_from_geodataframe", "write_results_geopackage"]


def read_patch_vector(path, grid, *, layer=None, id_column="id", weight_column=None, all_touched=False):
    """Patches from a vector file: points mark the cell they fall in, polygons the cells they cover.

    Features are reprojected to the grid's CRS (geopandas, which uses pyproj). A polygon covers the cells
    whose centres lie inside it, or with ``all_touched`` every cell it touches (for thin polygons such as
    ponds drawn as narrow shapes or river banks). Multi-part features count as one patch; several features
    may share an id.

    Parameters
    ----------
    path : str or Path
        A GeoPackage, GeoJSON, Shapefile or FlatGeobuf file (anything pyogrio reads).
    grid : Grid
    layer : str, optional
        The layer to read; the file's only layer by default.
    id_column : str
        Column with each patch's id: whole numbers > 0.
    weight_column : str, optional
        Column with each patch's weight in the pair sum (finite, >= 0; the same on every feature of an id).
    all_touched : bool

    Raises
    ------
    InputError
        Naming the file, the layer and the feature: unreadable file or layer, no CRS, a missing column, an
        empty or invalid geometry, an id that is not a whole number > 0, a feature outside the raster or
        wholly on nodata, a cell claimed by two ids.
    """
    try:
        import geopandas as gpd
        import pyogrio
    except ImportError:   # pragma: no cover - both are dependencies of landflow
        raise InputError("reading vector patches needs geopandas and pyogrio (pip install geopandas pyogrio).")
    where = f"{path}" + (f", layer '{layer}'" if layer else "")
    try:
        layers = [name for name, _ in pyogrio.list_layers(path)]
    except Exception as exc:     # pyogrio's DataSourceError and friends
        raise InputError(f"cannot read the patch file '{path}': {str(exc).rstrip('. ')}. Check the path and that it "
                         "is a GeoPackage, GeoJSON, Shapefile or FlatGeobuf file.") from None
    if layer is None and len(layers) > 1:
        raise InputError(f"{path} holds several layers ({', '.join(layers)}); name one with 'patches.layer'.")
    if layer is not None and layer not in layers:
        raise InputError(f"{path} has no layer '{layer}'; its layers are {', '.join(layers)}. Fix 'patches.layer'.")
    frame = gpd.read_file(path, layer=layer, engine="pyogrio")
    return patches_from_geodataframe(frame, grid, id_column=id_column, weight_column=weight_column,
                                     all_touched=all_touched, source=where)


def patches_from_geodataframe(frame, grid, *, id_column="id", weight_column=None, all_touched=False,
                              source="GeoDataFrame"):
    """Patches from a geopandas GeoDataFrame of points or polygons (see :func:`read_patch_vector`)."""
    from rasterio.features import rasterize

    if frame.crs is None:
        raise InputError(f"{source}: the features have no CRS, so they cannot be placed on the raster. Set the "
                         "file's CRS (for example with a GIS) and try again.")
    if grid.crs is None:
        raise InputError(f"{source}: the landscape raster {grid.source} has no CRS, so vector patches cannot be "
                         "placed on it. Give the raster a CRS.")
    for column in [id_column] + ([weight_column] if weight_column else []):
        if column not in frame.columns:
            found = ", ".join(c for c in frame.columns if c != frame.geometry.name)
            raise InputError(f"{source}: no column '{column}'; the columns are {found or 'none'}. Name the right "
                             "one with 'patches.id_column' or 'patches.weight_column'.")
    frame = frame.reset_index(drop=True)
    empty = frame.geometry.is_empty | frame.geometry.isna()
    if empty.any():
        raise InputError(f"{source}: feature {int(np.argmax(empty.to_numpy()))} has an empty geometry. Remove it "
                         "or draw it.")
    invalid = ~frame.geometry.is_valid
    if invalid.any():
        f = int(np.argmax(invalid.to_numpy()))
        raise InputError(f"{source}: feature {f} (id {_plain(frame[id_column][f])!r}) has an invalid geometry "
                         "(for example a polygon that crosses itself). Repair it, for example with make_valid.")
    ids = _whole_ids(frame[id_column], source, id_column)
    frame = frame.to_crs(grid.crs)
    labels = np.zeros(grid.shape, dtype=np.int64)
    for f, (geometry, pid) in enumerate(zip(frame.geometry, ids)):
        covered = rasterize([(geometry, 1)], out_shape=grid.shape, transform=grid.transform, fill=0,
                            all_touched=all_touched or geometry.geom_type in ("Point", "MultiPoint",
                                                                             "LineString", "MultiLineString"),
                            dtype="uint8").astype(bool)
        if not covered.any():
            raise InputError(f"{source}: feature {f} (id {pid}) lies outside the raster {grid.source} or covers no "
                             "cell centre. Check its coordinates and CRS, or set 'patches.all_touched = true' for "
                             "thin polygons.")
        if not (covered & grid.mask).any():
            raise InputError(f"{source}: feature {f} (id {pid}) lies wholly on nodata cells of {grid.source}. Move "
                             "it onto the landscape.")
        clash = covered & (labels != 0) & (labels != pid)
        if clash.any():
            r, c = np.argwhere(clash)[0]
            raise InputError(f"{source}: feature {f} (id {pid}) and id {labels[r, c]} both claim the cell at "
                             f"{grid.where(r, c)}. Make the features not overlap, or give them one id.")
        labels[covered] = pid
    weight = None
    if weight_column:
        values = frame[weight_column].to_numpy(dtype=float, na_value=np.nan)
        bad = ~np.isfinite(values) | (values < 0)
        if bad.any():
            f = int(np.argmax(bad))
            raise InputError(f"{source}: feature {f} has {weight_column!r} = {_plain(values[f])!r}; a patch "
                             "weight must be a finite number >= 0.")
        weight = {}
        for pid, value in zip(ids, values):
            if weight.setdefault(int(pid), float(value)) != float(value):
                raise InputError(f"{source}: features of patch {pid} give different {weight_column!r}; give every "
                                 "feature of one patch the same weight.")
    return Patches(labels, weight, str(source))


def _whole_ids(column, source, name):
    values = column.to_numpy()
    try:
        numbers = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        f = next(i for i, v in enumerate(values) if not _is_number(v))
        raise InputError(f"{source}: feature {f} has {name!r} = {_plain(values[f])!r}; patch ids must be whole "
                         "numbers > 0 (text ids are not supported yet: add a numeric id column).") from None
    bad = ~np.isfinite(numbers) | (numbers != np.round(numbers)) | (numbers <= 0)
    if bad.any():
        f = int(np.argmax(bad))
        raise InputError(f"{source}: feature {f} has {name!r} = {_plain(values[f])!r}; patch ids must be whole "
                         "numbers > 0.")
    return numbers.astype(np.int64)


def _is_number(value):
    try:
        float(value)
    except (TypeError, ValueError):
        return False
    return True


def _plain(value):
    """A numpy scalar as the Python number it holds, for messages."""
    return value.item() if hasattr(value, "item") else value


def write_results_geopackage(path, grid, labels, *, links=None, patch_table=None):
    """Write a run's vector results as one GeoPackage (OGC 12-128), readable by any GIS.

    Layers
    ------
    ``patches``
        One (multi)polygon per patch, traced from its cells (rasterio.features.shapes), with ``patch``,
        ``cells`` and ``area`` (map units squared), and the columns of ``patch_table`` (indexed by patch id).
    ``links``
        One line per patch pair, between the two patches' representative points (a point inside each
        patch), with the columns of ``links`` (a table with ``patch_a`` and ``patch_b``).

    The file appears under its final name only once it is complete.
    """
    import geopandas as gpd
    from rasterio.features import shapes
    from shapely.geometry import LineString, shape
    from shapely.ops import unary_union

    from ._atomic import atomic_path

    labels = np.asarray(labels, dtype=np.int64)
    ids = [int(p) for p in np.unique(labels) if p != 0]
    pieces = {pid: [] for pid in ids}
    for geometry, value in shapes(labels.astype(np.int32) if labels.max() < 2**31 else labels.astype(np.float64),
                                  mask=labels != 0, transform=grid.transform):
        pieces[int(value)].append(shape(geometry))
    outlines = {pid: unary_union(parts) for pid, parts in pieces.items()}
    cell_area = abs(grid.transform.a * grid.transform.e)
    patches = gpd.GeoDataFrame({"patch": ids, "cells": [int((labels == pid).sum()) for pid in ids]},
                               geometry=[outlines[pid] for pid in ids], crs=grid.crs)
    patches["area"] = patches["cells"] * cell_area
    if patch_table is not None:
        patches = patches.merge(patch_table, left_on="patch", right_index=True, how="left")
    with atomic_path(path) as tmp:
        patches.to_file(tmp, layer="patches", driver="GPKG", engine="pyogrio")
        if links is not None and len(links):
            anchor = {pid: outlines[pid].representative_point() for pid in ids}
            lines = [LineString([anchor[int(a)], anchor[int(b)]])
                     for a, b in zip(links["patch_a"], links["patch_b"])]
            gpd.GeoDataFrame(links.reset_index(drop=True), geometry=lines, crs=grid.crs).to_file(
                tmp, layer="links", driver="GPKG", engine="pyogrio")
