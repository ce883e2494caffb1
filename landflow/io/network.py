"""Networks from files: edges from a vector line layer or a CSV edge list, zones snapped to the nodes.

A network's nodes are either the rows of a node table (CSV edge lists name
them in their ``from`` and ``to`` columns) or the ends of the lines of a
vector layer, joined when they lie within a tolerance of each other. Every
edge has a resistance (an attribute, or the line's length times a
per-length attribute) or a conductance. Zones, the network's patches, are
node sets: an id column of the node table, or points (the nearest node within
a distance) and polygons (every node inside) of a vector layer. Reading goes
through pandas and geopandas with the pyogrio engine.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from .sites import Patches
from .tables import read_csv_text
from .vectors import _where, feature_weights, patch_codes, read_features

__all__ = ["Network", "read_network", "read_zones", "CSV_SUFFIXES", "ONE_WAY_TRUE", "ONE_WAY_FALSE"]

CSV_SUFFIXES = (".csv", ".txt")

#: Values of a one-way column that mark a link as one-way, and as two-way (compared as lower-case text).
ONE_WAY_TRUE = ("1", "-1", "true", "t", "yes", "y")
ONE_WAY_FALSE = ("0", "false", "f", "no", "n", "")

#: Largest ratio of the largest to the smallest edge conductance (as for raster values, see landflow.graph).
MAX_SPAN = 1e10


@dataclass(eq=False)
class Network:
    """A network read from files: edges between numbered nodes, each with a resistance.

    Attributes
    ----------
    source, target : ndarray of int64, shape (m,)
        End nodes (0 .. N-1) of each edge, in the order of the input's rows or features.
    conductance : ndarray of float, shape (m,)
        Each edge's conductance (1 / resistance).
    node_id : ndarray, shape (N,)
        The id a user gave each node (node table or edge list ids; 0 .. N-1 for line ends).
    edge_id : ndarray, shape (m,)
        Each edge's row (CSV line number) or feature id (FID).
    x, y : ndarray of float, shape (N,), or None
        Node coordinates in map units, when known.
    crs : pyproj.CRS or None
    geometry : geopandas.GeoSeries or None
        Each edge's line (the input's lines, or straight lines between the node coordinates).
    length : ndarray of float or None
        Each edge's length in map units, when the geometry is known.
    nodes : pandas.DataFrame or None
        The node table's columns, one row per node (for zone columns and node mortality).
    edges : pandas.DataFrame
        The edge attributes as read, one row per edge (for edge mortality).
    source_name : str
        Where the edges came from, for messages.
    notes : list of str
        What was done to the input on the way (duplicates summed, loops dropped).
    """

    source: np.ndarray
    target: np.ndarray
    conductance: np.ndarray
    node_id: np.ndarray
    edge_id: np.ndarray
    x: np.ndarray | None
    y: np.ndarray | None
    crs: object
    geometry: object
    length: np.ndarray | None
    nodes: pd.DataFrame | None
    edges: pd.DataFrame
    source_name: str
    edge_label: str = "line"
    notes: list = field(default_factory=list)

    @property
    def n_nodes(self):
        return int(self.node_id.size)

    @property
    def n_edges(self):
        return int(self.source.size)

    @property
    def has_coordinates(self):
        return self.x is not None

    def where_edge(self, e):
        """How messages name edge ``e``: its line or feature and its two end nodes."""
        return (f"{self.source_name}, {self.edge_label} {_plain(self.edge_id[e])} (nodes "
                f"{_plain(self.node_id[self.source[e]])!r}-{_plain(self.node_id[self.target[e]])!r})")

    def graph(self, zones=None):
        """The conductance graph (see :func:`landflow.graph.network_graph`) with ``zones`` merged."""
        from ..graph import network_graph
        return network_graph(self.source, self.target, self.conductance, n_nodes=self.n_nodes, zones=zones,
                             source_name=self.source_name)


def _plain(value):
    return value.item() if isinstance(value, np.generic) else value


def read_network(path, *, layer=None, nodes=None, from_column="from", to_column="to", resistance_column=None,
                 conductance_column=None, resistance_per_length_column=None, join_tolerance=0.0, crs=None,
                 one_way_column=None, symmetrise_one_way=False):
    """Read a network from a vector line layer or a CSV edge list.

    Parameters
    ----------
    path : str or Path
        A CSV edge list (``.csv``: one row per edge, ``from_column`` and
        ``to_column`` naming its two end nodes) or a vector file of lines
        (GeoPackage, Shapefile, GeoJSON, FlatGeobuf): each line is an edge
        between its two ends.
    layer : str, optional
        The layer of a vector file with several.
    nodes : str or Path, optional
        For a CSV edge list: a CSV node table with an ``id`` column (the ids
        the edge list uses), optional ``x`` and ``y`` (map coordinates) and any
        other columns (zone ids, mortality).
    from_column, to_column : str
        The edge list's end-node columns.
    resistance_column, conductance_column, resistance_per_length_column : str
        Exactly one: each edge's resistance, its conductance, or (for lines,
        and for edge lists with node coordinates) its resistance per map unit
        of length, multiplied by the edge's length.
    join_tolerance : float
        Line ends closer than this (map units) are one node.
    crs : str, optional
        CRS of a node table's x and y.
    one_way_column : str, optional
        A column marking one-way links (1, -1, true, yes; 0, false, no or
        empty for two-way).
    symmetrise_one_way : bool
        Read each one-way link as a two-way link of the same resistance; a
        link given one way in each direction becomes one two-way link whose
        conductance is the mean of the two. Without it a one-way link is an
        error, since the models are undirected.

    Returns
    -------
    Network

    Raises
    ------
    InputError
        A missing column; an end node not in the node table (a dangling
        reference); a resistance or conductance that is missing, zero or
        negative; a one-way link; a geometry that is not one line. The
        message names the file, the line or feature and the fix.
    """
    path = Path(path)
    given = [k for k in (resistance_column, conductance_column, resistance_per_length_column) if k]
    if len(given) != 1:
        raise InputError(f"{path}: give exactly one of a resistance column, a conductance column or a resistance "
                         "per length column.")
    if path.suffix.lower() in CSV_SUFFIXES:
        network = _read_edge_list(path, nodes, from_column, to_column, crs)
    else:
        if nodes is not None:
            raise InputError(f"{path}: a node table only goes with a CSV edge list; the nodes of a line layer are "
                             "its line ends. Remove the node table, or give zones as points or polygons.")
        network = _read_lines(path, layer, join_tolerance)
    frame = network.edges
    column = given[0]
    values = _numeric_column(frame, column, network)
    if resistance_per_length_column:
        if network.length is None:
            raise InputError(f"{path}: 'resistance_per_length_column' needs edge lengths, but the edges have no "
                             "geometry; give the node table x and y, or a resistance column instead.")
        if network.crs is not None and network.crs.is_geographic:
            raise InputError(f"{path}: the network's CRS is geographic (degrees), so line lengths are not in "
                             "metres. Reproject the layer to a projected CRS (such as the local UTM zone) first.")
        what, values = "resistance per length", values * network.length
    else:
        what = "resistance" if resistance_column else "conductance"
    bad = ~np.isfinite(values) | (values <= 0)
    if bad.any():
        e = int(np.argmax(bad))
        raw = frame[column].iloc[e]
        shown = "nothing" if pd.isna(raw) or str(raw).strip() == "" else repr(_plain(raw))
        fix = ("an edge that cannot be crossed is left out (remove the row or feature)" if what == "conductance"
               else "a resistance must be finite and > 0; remove edges that cannot be crossed")
        if what == "resistance per length" and np.isfinite(values[e]) and network.length[e] <= 0:
            raise InputError(f"{network.where_edge(e)}: the line has length 0, so its resistance would be 0. "
                             "Remove it or join its ends.")
        raise InputError(f"{network.where_edge(e)}: '{column}' holds {shown}, but {fix}.")
    network.conductance = values if what == "conductance" else 1.0 / values
    _one_way(network, one_way_column, symmetrise_one_way)
    _drop_loops(network)
    _note_duplicates(network)
    if network.n_edges == 0:
        raise InputError(f"{path}: the network has no edges between two different nodes.")
    low, high = network.conductance.min(), network.conductance.max()
    if high > MAX_SPAN * low:
        e = int(np.argmax(network.conductance == (high if high / MAX_SPAN > low else low)))
        raise InputError(f"{network.where_edge(e)}: edge conductances span {low:.3g} to {high:.3g}, a ratio above "
                         f"{MAX_SPAN:.0e} that double-precision solves cannot resolve. Leave impassable links out "
                         "instead of giving them an extreme value, or rescale.")
    return network


def _numeric_column(frame, column, network):
    if column not in frame.columns:
        raise InputError(f"{network.source_name}: no column {column!r}; found "
                         f"{', '.join(map(repr, [c for c in frame.columns if c != 'geometry']))}. Fix the column "
                         "key or add the column.")
    return pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float)


def _require(table, columns, path, what, hint):
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise InputError(f"{path}: missing column(s) {', '.join(map(repr, missing))} in the {what}; found "
                         f"{', '.join(map(repr, table.columns)) or 'none'}. {hint}")


def _read_edge_list(path, nodes, from_column, to_column, crs):
    edges = read_csv_text(path, "edge list")
    _require(edges, [from_column, to_column], path, "edge list",
             "Name the end-node columns with 'from_column' and 'to_column'.")
    ends = pd.concat([edges[from_column], edges[to_column]], ignore_index=True)
    blank = ends == ""
    if blank.any():
        row = int(np.flatnonzero(blank.to_numpy())[0]) % len(edges)
        raise InputError(f"{path}, line {row + 2}: an end node is empty. Give both '{from_column}' and "
                         f"'{to_column}' on every line.")
    node_table = x = y = None
    if nodes is not None:
        node_table = read_csv_text(nodes, "node table")
        _require(node_table, ["id"], nodes, "node table", "The node table needs an 'id' column with the ids the "
                 "edge list uses (and x, y for coordinates).")
        ids = node_table["id"]
        dup = ids.duplicated()
        if dup.any():
            line = int(np.argmax(dup.to_numpy())) + 2
            raise InputError(f"{nodes}, line {line}: node id {ids.iloc[line - 2]!r} appears twice. Give every node "
                             "one row.")
        node_ids = ids.to_numpy()
        if {"x", "y"} <= set(node_table.columns):
            xy = {}
            for col in ("x", "y"):
                values = pd.to_numeric(node_table[col], errors="coerce")
                if values.isna().any():
                    line = int(np.argmax(values.isna().to_numpy())) + 2
                    raise InputError(f"{nodes}, line {line}: column {col!r} holds {node_table[col].iloc[line - 2]!r}, "
                                     "not a number. Fill it in or remove the x and y columns.")
                xy[col] = values.to_numpy(dtype=float)
            x, y = xy["x"], xy["y"]
        position = pd.Series(np.arange(ids.size), index=ids.to_numpy())
        known = ends.isin(position.index)
        if not known.all():
            k = int(np.argmax(~known.to_numpy()))
            row, column = k % len(edges), (from_column if k < len(edges) else to_column)
            raise InputError(f"{path}, line {row + 2}: '{column}' names node {ends.iloc[k]!r}, which is not in the "
                             f"node table {nodes} (a dangling reference). Add the node to the table or fix the id.")
        index = position[ends.to_numpy()].to_numpy()
    else:
        codes, uniques = pd.factorize(ends)
        node_ids, index = np.asarray(uniques), codes
        if crs is not None:
            raise InputError(f"{path}: 'crs' gives the CRS of the node table's x and y, but no node table is given. "
                             "Remove it or give the node table.")
    node_ids = _as_numbers(node_ids)
    m = len(edges)
    source, target = index[:m].astype(np.int64), index[m:].astype(np.int64)
    the_crs = None
    if crs is not None:
        from pyproj import CRS
        from pyproj.exceptions import CRSError
        try:
            the_crs = CRS.from_user_input(crs)
        except CRSError as exc:
            raise InputError(f"{path}: cannot read the CRS {crs!r} ({exc}); give one such as 'EPSG:25832'.") from None
    geometry = length = None
    if x is not None:
        import geopandas as gpd
        import shapely
        coords = np.stack([np.stack([x[source], y[source]], axis=1), np.stack([x[target], y[target]], axis=1)],
                          axis=1)
        geometry = gpd.GeoSeries(shapely.linestrings(coords), crs=the_crs)
        length = np.hypot(x[source] - x[target], y[source] - y[target])
    return Network(source, target, np.ones(m), node_ids, np.arange(m) + 2, x, y, the_crs, geometry, length,
                   node_table.reset_index(drop=True) if node_table is not None else None, edges, str(path),
                   edge_label="line")


def _as_numbers(ids):
    """Node ids as whole numbers when every id is one, else as text."""
    try:
        numbers = pd.to_numeric(pd.Series(ids), errors="raise")
    except (ValueError, TypeError):
        return np.asarray(ids, dtype=object)
    if pd.api.types.is_integer_dtype(numbers):
        return numbers.to_numpy(dtype=np.int64)
    return np.asarray(ids, dtype=object)


def _read_lines(path, layer, tolerance):
    import shapely
    from scipy.sparse import coo_array
    from scipy.sparse.csgraph import connected_components
    from scipy.spatial import cKDTree

    frame = read_features(path, layer=layer, what="network lines")
    where = _where(path, layer)
    if len(frame) == 0:
        raise InputError(f"{where}: the layer holds no features; a network needs lines.")
    geoms = frame.geometry.to_numpy()
    empty = frame.geometry.isna().to_numpy() | shapely.is_empty(geoms)
    if empty.any():
        raise InputError(f"{where}, feature {frame.index[empty][0]}: empty geometry. Delete the feature or draw "
                         "its line.")
    kinds = frame.geometry.geom_type.to_numpy()
    multi = kinds == "MultiLineString"
    if multi.any():
        geoms = geoms.copy()
        geoms[multi] = shapely.line_merge(geoms[multi])
        kinds = shapely.get_type_id(geoms)
        kinds = np.where(kinds == 1, "LineString", np.where(kinds == 5, "MultiLineString", "other"))
    bad = kinds != "LineString"
    if bad.any():
        fid = frame.index[bad][0]
        kind = frame.geometry.geom_type.to_numpy()[bad][0]
        fix = ("its parts do not join into one line; split it into one feature per part" if kind == "MultiLineString"
               else "network edges are lines; points and polygons belong in [zones] features")
        raise InputError(f"{where}, feature {fid}: the geometry is a {kind}; {fix}.")
    if frame.crs is None:
        raise InputError(f"{where}: the network lines have no CRS. Set the layer's CRS (in a GIS, or "
                         "GeoDataFrame.set_crs in Python) to the one its coordinates are in.")
    first = shapely.get_point(geoms, 0)
    last = shapely.get_point(geoms, -1)
    ends = np.concatenate([shapely.get_coordinates(first), shapely.get_coordinates(last)])
    m = len(frame)
    n_ends = ends.shape[0]
    if tolerance > 0:
        pairs = cKDTree(ends).query_pairs(r=tolerance, output_type="ndarray")
    else:
        _, inverse = np.unique(ends, axis=0, return_inverse=True)
        order = np.argsort(inverse.ravel(), kind="stable")
        same = inverse.ravel()[order][1:] == inverse.ravel()[order][:-1]
        pairs = np.stack([order[:-1][same], order[1:][same]], axis=1)
    link = coo_array((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n_ends, n_ends)) if len(pairs) else \
        coo_array((n_ends, n_ends))
    _, label = connected_components(link, directed=False)
    # number the nodes in order of first appearance: feature by feature, start before end
    appearance = np.empty(n_ends, dtype=np.int64)
    appearance[0::2], appearance[1::2] = np.arange(m), np.arange(m) + m
    _, first_seen = np.unique(label[appearance], return_index=True)
    rank = np.empty(first_seen.size, dtype=np.int64)
    rank[np.argsort(first_seen, kind="stable")] = np.arange(first_seen.size)
    node = rank[np.unique(label, return_inverse=True)[1].ravel()]
    n = int(node.max()) + 1
    count = np.bincount(node, minlength=n)
    x = np.bincount(node, ends[:, 0], minlength=n) / count
    y = np.bincount(node, ends[:, 1], minlength=n) / count
    import geopandas as gpd
    geometry = gpd.GeoSeries(geoms, crs=frame.crs)
    edges = pd.DataFrame(frame.drop(columns=frame.geometry.name)).reset_index(drop=True)
    return Network(node[:m], node[m:], np.ones(m), np.arange(n, dtype=np.int64), frame.index.to_numpy(), x, y,
                   frame.crs, geometry.reset_index(drop=True), shapely.length(geoms), None, edges, where,
                   edge_label="feature")


def _one_way(network, column, symmetrise):
    if column is None:
        return
    frame = network.edges
    if column not in frame.columns:
        raise InputError(f"{network.source_name}: no column {column!r} (network.one_way_column); found "
                         f"{', '.join(map(repr, frame.columns))}.")
    text = frame[column].astype("string").fillna("").str.strip().str.lower()
    unknown = ~text.isin(ONE_WAY_TRUE + ONE_WAY_FALSE)
    if unknown.any():
        e = int(np.argmax(unknown.to_numpy()))
        raise InputError(f"{network.where_edge(e)}: '{column}' holds {frame[column].iloc[e]!r}; a one-way column "
                         f"holds {', '.join(ONE_WAY_TRUE[:5])} for one-way links and 0, false, no or nothing for "
                         "two-way links.")
    one_way = text.isin(ONE_WAY_TRUE).to_numpy()
    if not one_way.any():
        return
    if not symmetrise:
        e = int(np.argmax(one_way))
        raise InputError(f"{network.where_edge(e)} is one-way ('{column}' = {frame[column].iloc[e]!r}), and "
                         f"{int(one_way.sum())} link(s) in all; landflow's models are undirected. Set "
                         "'network.symmetrise_one_way = true' to read them as two-way links, or fix the column.")
    # a link given one way in each direction: one two-way link of the mean conductance of the two
    lo = np.minimum(network.source, network.target)
    hi = np.maximum(network.source, network.target)
    forward = network.source <= network.target
    keep = np.ones(network.n_edges, dtype=bool)
    table = pd.DataFrame({"lo": lo, "hi": hi, "forward": forward, "e": np.arange(network.n_edges)})[one_way]
    merged = 0
    for _, group in table.groupby(["lo", "hi"]):
        if group["forward"].nunique() < 2:
            continue
        there = group.loc[group["forward"], "e"].to_numpy()
        back = group.loc[~group["forward"], "e"].to_numpy()
        c = network.conductance
        mean = (c[there].sum() + c[back].sum()) / 2
        c[there[0]] = mean
        keep[np.concatenate([there[1:], back])] = False
        merged += 1
    network.notes.append(f"{network.source_name}: {int(one_way.sum())} one-way link(s) read as two-way "
                         "(network.symmetrise_one_way)" + (f"; {merged} pair(s) given one way in each direction "
                                                           "became one two-way link of their mean conductance"
                                                           if merged else ""))
    _keep(network, keep)


def _keep(network, keep):
    if keep.all():
        return
    network.source, network.target = network.source[keep], network.target[keep]
    network.conductance, network.edge_id = network.conductance[keep], network.edge_id[keep]
    network.edges = network.edges[keep].reset_index(drop=True)
    if network.geometry is not None:
        network.geometry = network.geometry[keep].reset_index(drop=True)
        network.length = network.length[keep]


def _drop_loops(network):
    loop = network.source == network.target
    if loop.any():
        e = int(np.argmax(loop))
        network.notes.append(f"{network.where_edge(e)} joins a node to itself and carries no current; "
                             f"{int(loop.sum())} such edge(s) left out")
        _keep(network, ~loop)


def _note_duplicates(network):
    lo = np.minimum(network.source, network.target)
    hi = np.maximum(network.source, network.target)
    key = pd.Series(lo * network.n_nodes + hi)
    dup = key.duplicated().to_numpy()
    if dup.any():
        e = int(np.argmax(dup))
        first = int(np.argmax((key == key[e]).to_numpy()))
        network.notes.append(f"{network.where_edge(e)} joins two nodes already joined by {network.edge_label} "
                             f"{_plain(network.edge_id[first])}, and {int(dup.sum())} edge(s) in all do so; parallel "
                             "edges are summed as parallel conductances. If one link is listed twice, keep one row")


def map_crs(crs):
    """A network's CRS as the map frame reads it (a rasterio CRS, with linear units), or None."""
    if crs is None:
        return None
    from rasterio.crs import CRS
    return CRS.from_wkt(crs.to_wkt())


# -- zones ---------------------------------------------------------------------------------------------------
# A network's zones are its patches: a Patches record whose labels give the zone of every node (0 = none), on
# the network's 1 x N pseudo-grid, with the names of text ids and the zones' weights.


def read_zones(network, *, column=None, features=None, layer=None, id_column="id", snap_distance=None,
               weight_column=None):
    """The zone of every node: from a column of the node table, or from points and polygons.

    Parameters
    ----------
    network : Network
    column : str, optional
        A column of the network's node table holding each node's zone id
        (whole numbers > 0 or text; 0 or empty for none).
    features : str or Path, optional
        A vector file of points (each the nearest node within
        ``snap_distance``) or polygons (every node inside or on the boundary).
        Its CRS must be the network's. Features with an empty or 0 id are
        skipped, so a layer of all the network's nodes with a zone column
        works too.
    layer, id_column, weight_column : for ``features``.
    snap_distance : float
        Map units; needed for points.

    Returns
    -------
    Patches, with ``labels`` of shape (1, N): the zone of each node as patch labels on the network's 1 x N
    pseudo-grid.

    Raises
    ------
    InputError
        A zone that snaps to no node, a CRS that differs from the network's,
        one node claimed by two zones, or a bad id. The message names the file
        and the feature.
    """
    n = network.n_nodes
    if column is not None:
        if network.nodes is None:
            raise InputError(f"{network.source_name}: zones from a node column need a node table "
                             "([network] nodes); give zones as points or polygons ([zones] features) instead.")
        if column not in network.nodes.columns:
            raise InputError(f"{network.source_name}: the node table has no column {column!r} ([zones] column); "
                             f"found {', '.join(map(repr, network.nodes.columns))}.")
        raw = network.nodes[column].astype("string").fillna("").str.strip()
        numbers = pd.to_numeric(raw.replace("", "0"), errors="coerce")
        member = ~raw.isin(["", "0"]).to_numpy()
        ids = (numbers if numbers.notna().all() else raw)[member]
        ids.index = pd.Index(network.node_id[member], name="node")
        codes, names = patch_codes(ids, where=f"{network.source_name}: node table, column {column!r}",
                                   id_column=column)
        labels = np.zeros(n, dtype=np.int64)
        labels[member] = codes
        return Patches(labels.reshape(1, n), None, f"node table column {column!r}", names)
    import shapely
    frame = read_features(features, layer=layer, what="zone features")
    where = _where(features, layer)
    if id_column not in frame.columns:
        raise InputError(f"{where}: no column {id_column!r} ([zones] id_column); found "
                         f"{', '.join(map(repr, [c for c in frame.columns if c != frame.geometry.name]))}.")
    # a node layer: points with an empty or 0 id are nodes of no zone
    ident = frame[id_column]
    text = ident.astype("string").str.strip()
    frame = frame[~(ident.isna() | (text == "") | (text == "0")).to_numpy()]
    if len(frame) == 0:
        raise InputError(f"{where}: the layer holds no features with a zone id in {id_column!r}; zones need at least "
                         "two.")
    if not network.has_coordinates:
        raise InputError(f"{where}: zones from points or polygons need node coordinates, but the network has none; "
                         "give the node table x and y, or use [zones] column.")
    if frame.crs is None or network.crs is None or frame.crs != network.crs:
        theirs = frame.crs.to_string() if frame.crs is not None else "no CRS"
        ours = network.crs.to_string() if network.crs is not None else "no CRS"
        raise InputError(f"{where}: the zone features are in {theirs} but the network in {ours} (a CRS mismatch). "
                         "Reproject one to the other (ogr2ogr -t_srs, or GeoDataFrame.to_crs), or set the missing CRS.")
    codes, names = patch_codes(frame[id_column], where=where, id_column=id_column)
    shown = (lambda c: names[c]) if names else (lambda c: c)
    geoms = frame.geometry.to_numpy()
    kinds = frame.geometry.geom_type.to_numpy()
    points = np.isin(kinds, ["Point", "MultiPoint"])
    polys = np.isin(kinds, ["Polygon", "MultiPolygon"])
    if not (points | polys).all():
        fid = frame.index[~(points | polys)][0]
        raise InputError(f"{where}, feature {fid}: a {kinds[~(points | polys)][0]}; zones are points or polygons.")
    if points.any() and snap_distance is None:
        raise InputError(f"{where}: the zones include points, which snap to the nearest node within "
                         "'zones.snap_distance' (map units); give it.")
    from scipy.spatial import cKDTree
    tree = cKDTree(np.stack([network.x, network.y], axis=1))
    claim = np.zeros(n, dtype=np.int64)
    owner = np.full(n, -1, dtype=np.int64)
    for k, (fid, geom, code) in enumerate(zip(frame.index, geoms, codes)):
        if points[k]:
            xy = shapely.get_coordinates(geom)
            distance, nearest = tree.query(xy)
            far = distance > snap_distance
            if far.any():
                raise InputError(f"{where}, feature {fid} (zone {shown(int(code))!r}): the nearest node is "
                                 f"{distance[far][0]:.4g} map units away, beyond zones.snap_distance = "
                                 f"{snap_distance:g}, so it snaps to nothing. Move the point onto the network or "
                                 "raise snap_distance.")
            found = np.unique(nearest)
        else:
            found = np.flatnonzero(shapely.intersects_xy(geom, network.x, network.y))
            if not found.size:
                raise InputError(f"{where}, feature {fid} (zone {shown(int(code))!r}): no node of the network lies "
                                 "inside the polygon, so it snaps to nothing. Enlarge it or give the zone as a point.")
        clash = found[(owner[found] >= 0) & (claim[found] != code)]
        if clash.size:
            other = int(claim[clash[0]])
            raise InputError(f"{where}, feature {fid}: node {_plain(network.node_id[clash[0]])!r} is claimed by zones "
                             f"{shown(other)!r} and {shown(int(code))!r}. Merge them into one id, or move or shrink "
                             "one of them.")
        claim[found], owner[found] = code, k
    weight = None
    if weight_column is not None:
        if weight_column not in frame.columns:
            raise InputError(f"{where}: no column {weight_column!r} ([zones] weight_column).")
        weight = feature_weights(frame, weight_column, codes, where=where, id_column=id_column, shown=shown,
                                 kind="zone")
    return Patches(claim.reshape(1, n), weight, where, names)
