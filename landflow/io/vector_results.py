"""Vector layers of results for a GIS: patch polygons, links, routes and cells, in one GeoPackage.

The functions here turn plain tables and grids into GeoDataFrames
(:func:`patch_polygons`, :func:`link_lines`, :func:`route_lines`,
:func:`cell_points`) and write them as layers of one GeoPackage
(:func:`write_geopackage`). Polygons come from ``rasterio.features.shapes``.
"""

from __future__ import annotations


import numpy as np
import pandas as pd

from ._atomic import atomic_path

__all__ = ["patch_polygons", "link_lines", "route_lines", "cell_points", "write_geopackage"]


def _crs(grid):
    crs = grid.crs
    return None if crs is None else (crs.to_wkt() if hasattr(crs, "to_wkt") else crs)


def patch_polygons(labels, grid, attributes=None):
    """One (multi)polygon per patch, traced from its cells with ``rasterio.features.shapes``.

    Parameters
    ----------
    labels : ndarray of int, shape of the grid
        Patch codes, 0 = no patch.
    grid : Grid
    attributes : DataFrame, optional
        Per-patch numbers indexed by patch code, joined onto the polygons.

    Returns
    -------
    GeoDataFrame
        Columns ``patch`` (code), ``cells``, ``area`` (map units squared), the
        attributes, and the geometry; one row per patch in code order.
    """
    import geopandas as gpd
    import shapely
    from rasterio.features import shapes

    labels = np.asarray(labels)
    codes, geoms = [], []
    for geojson, value in shapes(labels.astype(np.int32), mask=labels > 0, transform=grid.transform,
                                 connectivity=4):
        codes.append(int(value))
        geoms.append(shapely.geometry.shape(geojson))
    pieces = gpd.GeoDataFrame({"patch": codes}, geometry=geoms, crs=_crs(grid))
    merged = pieces.dissolve(by="patch", as_index=False) if len(pieces) else pieces
    ids, counts = np.unique(labels[labels > 0], return_counts=True)
    merged["cells"] = merged["patch"].map(dict(zip(ids.tolist(), counts.tolist())))
    merged["area"] = merged.geometry.area
    if attributes is not None:
        merged = merged.join(attributes, on="patch")
    return merged[[c for c in merged.columns if c != "geometry"] + ["geometry"]]


def link_lines(table, anchors, grid):
    """Straight lines between the two patches of each row of ``table`` (columns ``patch_a``, ``patch_b``).

    ``anchors`` maps a patch code to the (x, y) where its lines meet (a point
    inside the patch). The line only shows which patches a row links; the
    numbers are the row's.
    """
    import geopandas as gpd
    import shapely

    geoms = [shapely.LineString([anchors[int(a)], anchors[int(b)]])
             for a, b in zip(table["patch_a"], table["patch_b"])]
    return gpd.GeoDataFrame(table.reset_index(drop=True), geometry=geoms, crs=_crs(grid))


def route_lines(table, routes, grid):
    """One line per row of ``table`` through the cell centres in ``routes`` (a list of (n, 2) xy arrays)."""
    import geopandas as gpd
    import shapely

    geoms = [shapely.LineString(xy) if len(xy) >= 2 else None for xy in routes]
    return gpd.GeoDataFrame(table.reset_index(drop=True), geometry=geoms, crs=_crs(grid))


def cell_points(table, grid):
    """Points at the cell centres given by columns ``x`` and ``y`` of ``table``, with its other columns."""
    import geopandas as gpd

    return gpd.GeoDataFrame(table.reset_index(drop=True),
                            geometry=gpd.points_from_xy(table["x"], table["y"]), crs=_crs(grid))


def write_geopackage(path, layers):
    """Write GeoDataFrames as the layers of one GeoPackage, atomically.

    Parameters
    ----------
    path : str or Path
    layers : dict {layer name: GeoDataFrame}
        Written in order; infinite numbers are written as empty (NULL)
        values, which every GIS reads.
    """
    import logging

    import pyogrio

    quiet = logging.getLogger("pyogrio")
    level = quiet.level
    quiet.setLevel(logging.WARNING)       # not one INFO line per layer in the run's log
    try:
        with atomic_path(path) as tmp:
            for name, frame in layers.items():
                frame = frame.copy()
                for col in frame.columns:
                    if col != frame.geometry.name and pd.api.types.is_float_dtype(frame[col]):
                        frame[col] = frame[col].where(np.isfinite(frame[col]))
                pyogrio.write_dataframe(frame, tmp, layer=name, driver="GPKG", append=tmp.exists())
    finally:
        quiet.setLevel(level)
