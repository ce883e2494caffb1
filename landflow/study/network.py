"""Network studies: the run context of a study whose landscape is a network ([network] and [zones]).

A network's nodes take the place of cells (see :func:`landflow.graph.network_graph`), so every analysis step
that needs no grid runs unchanged: its per-node values (``ctx.write_raster``) become columns of the node
table, and steps add per-edge values (``ctx.write_edge_values``). At the end of the run the network comes back
as ``network_nodes.csv``, ``network_edges.csv`` and, with coordinates, ``network.gpkg`` (layers ``edges`` and
``nodes``); quick-look maps draw the network with line widths and colours by value.
"""

from __future__ import annotations

from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import ConfigError, InputError
from ..graph import CellEdges
from ..io.network import map_crs, read_network, read_zones
from ..report import network_words
from .run import RunContext

__all__ = ["NetworkContext", "write_network_outputs", "NETWORK_FILES"]

NETWORK_FILES = ("network_nodes.csv", "network_edges.csv", "network.gpkg")


class NetworkContext(RunContext):
    """What an analysis step sees on a network study (see :class:`landflow.study.run.RunContext`)."""

    is_network = True

    def _load(self):
        spec = self.study.settings["network"]
        zones = self.study.settings["zones"]
        self.grid = None
        self.kind = "resistance"
        self.from_suitability = False
        self.node_columns = {}
        self.edge_columns = {}
        self._changed_networks = {}
        with self.timed("read inputs"):
            self.network = self._read_network(spec["edges"])
            features = zones["features"]
            self.patches = read_zones(self.network, column=zones["column"],
                                      features=self._input(features) if features is not None else None,
                                      layer=zones["layer"], id_column=zones["id_column"] or "id",
                                      snap_distance=zones["snap_distance"], weight_column=zones["weight_column"])
        for note in self.network.notes:
            self.warn(note)
        with self.timed("build graph"):
            self.graph = self.network.graph(self.patches.labels.ravel())
        self._check_patches()

    def _read_network(self, edges):
        spec = self.study.settings["network"]
        return read_network(self._input(edges), layer=spec["layer"],
                            nodes=self._input(spec["nodes"]) if spec["nodes"] is not None else None,
                            from_column=spec["from_column"], to_column=spec["to_column"],
                            resistance_column=spec["resistance_column"], conductance_column=spec["conductance_column"],
                            resistance_per_length_column=spec["resistance_per_length_column"],
                            join_tolerance=spec["join_tolerance"], crs=spec["crs"],
                            one_way_column=spec["one_way_column"], symmetrise_one_way=spec["symmetrise_one_way"])

    def read_changed_network(self, path, key):
        """Another edge file read as [network] reads its edges, with the same zones, as a graph.

        Read once: the step's check and its run share the result (a network is small next to a raster).
        """
        if path not in self._changed_networks:
            self._changed_networks[path] = self._read_changed_network(path, key)
        return self._changed_networks[path]

    def _read_changed_network(self, path, key):
        try:
            changed = self._read_network(path)
        except InputError as exc:
            raise InputError(f"{self.study.path or 'study'}: '{key}': {exc}") from None
        same = changed.n_nodes == self.network.n_nodes and np.array_equal(changed.node_id, self.network.node_id)
        if not same:
            raise InputError(f"{self.study.path or 'study'}: '{key}': the changed network {path} has other nodes "
                             f"({changed.n_nodes}) than {self.network.source_name} ({self.network.n_nodes}); a "
                             "what-if changes edges between the same nodes. Use the same node table (or line ends), "
                             "with the new links' ends among them.")
        return changed, changed.graph(self.patches.labels.ravel())

    def landscape_record(self):
        """The manifest's account of the network."""
        net, graph = self.network, self.graph
        record = {"network": True, "source": Path(net.source_name.split(", layer")[0]).name
                  + (net.source_name[len(net.source_name.split(", layer")[0]):]), "network_nodes": net.n_nodes,
                  "network_edges": net.n_edges, "coordinates": net.has_coordinates,
                  "crs": net.crs.to_string() if net.crs is not None else None,
                  "cells": net.n_nodes, "nodes": graph.n_nodes, "edges": graph.n_edges,
                  "patches": [int(p) for p in graph.patch_ids], "pieces": graph.n_pieces}
        if self.patches.names:
            record["patch_names"] = {str(int(p)): self.patches.name_of(p) for p in graph.patch_ids}
        return record

    def changed_edges(self, changed):
        """Indices of the edges of ``changed`` (a Network) that the study's network does not have as they are."""
        def keys(net):
            """(low node, high node, conductance to 12 decimals) of every edge, in edge order."""
            lo = np.minimum(net.source, net.target)
            hi = np.maximum(net.source, net.target)
            return list(zip(lo.tolist(), hi.tolist(), np.round(net.conductance, 12).tolist()))
        before = set(keys(self.network))
        return [e for e, k in enumerate(keys(changed)) if k not in before], changed

    def where(self, row, col):
        """How messages name a network node (the pseudo-grid's cell (0, col))."""
        return f"node {self.network.node_id[int(col)]!r}"

    def _check_patches(self):
        found = self.graph.patch_ids
        if found.size < 2:
            raise InputError(f"{self.patches.source}: found {found.size} zone(s); pairwise analyses need at least "
                             "two. Check the zone ids (0 or empty means no zone).")
        comp = self.graph.components[: found.size]
        if np.unique(comp).size > 1:
            groups = [", ".join(str(self.patches.name_of(p)) for p in found[comp == c]) for c in np.unique(comp)]
            self.warn("the network falls apart into pieces that no walk can cross; zones in different pieces have "
                      f"infinite effective resistance. Groups: {' | '.join(groups)}")

    # -- what is grid-only ---------------------------------------------------
    def _grid_only(self, what):
        return ConfigError(f"{self.study.path or 'study'}: {what} is a raster on a landscape's grid, but this study "
                           "is a network, which has no grid. Remove it (docs/networks.md lists what networks take).")

    def read_aligned(self, path, what):
        raise self._grid_only(f"the {what} '{Path(path).name}'")

    def read_landscape_like(self, path, key):
        raise self._grid_only(f"'{key}'")

    # -- shared solves -------------------------------------------------------
    @cached_property
    def least_cost(self):
        """Least-cost distances over the network's own edges (cost = resistance; length in map units)."""
        from ..analyses.least_cost import least_cost
        net = self.network
        length = net.length if net.length is not None else np.full(net.n_edges, np.nan)
        with self.timed("least-cost search"):
            edges = CellEdges(net.source, net.target, length, net.conductance, length)
            return least_cost(self.graph, edges)

    @cached_property
    def edge_mortality(self):
        """Probability of dying while crossing each edge, or None."""
        spec = self.study.settings["mortality"]
        net = self.network
        if spec["edge_column"] is not None:
            column = spec["edge_column"]
            if column not in net.edges.columns:
                raise InputError(f"{net.source_name}: no column {column!r} ('mortality.edge_column'); found "
                                 f"{', '.join(map(repr, net.edges.columns))}.")
            m = pd.to_numeric(net.edges[column], errors="coerce").to_numpy(dtype=float)
        elif spec["death_per_resistance"] is not None:
            m = 1.0 - np.exp(-spec["death_per_resistance"] / net.conductance)
        else:
            return None
        bad = ~np.isfinite(m) | (m < 0) | (m >= 1)
        if bad.any():
            e = int(np.argmax(bad))
            raise InputError(f"{net.where_edge(e)}: the death probability of crossing the edge is {float(m[e])!r}; it must "
                             "be a number in [0, 1). Fix the mortality column (an edge nobody survives is left out).")
        return m

    @cached_property
    def mortality(self):
        """Per-node death probability per step (on the 1 x N pseudo-grid), or None.

        Edge mortality m_e is the same walk as conductances c_e (1 - m_e) with a per-step death probability
        kappa_x = sum_e c_e m_e / C_x at each node: both give the hop x -> y the probability c_xy (1 - m_xy) / C_x
        and death the rest (derived from the definitions; tests/reference/test_network_study.py checks it with a
        simulation).
        """
        from ..analyses.absorption import check_mortality
        spec = self.study.settings["mortality"]
        net = self.network
        if spec["node_column"] is not None:
            column = spec["node_column"]
            if net.nodes is None or column not in net.nodes.columns:
                raise InputError(f"{net.source_name}: 'mortality.node_column' = {column!r} needs that column in the "
                                 "node table ([network] nodes); give it, or use 'mortality.edge_column'.")
            values = pd.to_numeric(net.nodes[column].replace("", "0"), errors="coerce").to_numpy(dtype=float)
            return check_mortality(values.reshape(1, -1), self.graph, source=f"node table column {column!r}",
                                   where=self.where)
        m = self.edge_mortality
        if m is None:
            return None
        node = self.graph.node_of_cell.ravel()
        i, j = node[net.source], node[net.target]
        apart = i != j
        killed = np.bincount(i[apart], (net.conductance * m)[apart], minlength=self.graph.n_nodes) \
            + np.bincount(j[apart], (net.conductance * m)[apart], minlength=self.graph.n_nodes)
        with np.errstate(invalid="ignore", divide="ignore"):
            kappa = np.where(self.graph.total_conductance > 0, killed / self.graph.total_conductance, 0.0)
        return kappa[node].reshape(1, -1)

    @cached_property
    def walk_graph(self):
        """The graph the walk hops on: with edge mortality, conductances c_e (1 - m_e) (see :attr:`mortality`)."""
        m = self.edge_mortality
        if m is None or self.study.settings["mortality"]["node_column"] is not None:
            return self.graph
        from ..graph import network_graph
        net = self.network
        return network_graph(net.source, net.target, net.conductance * (1.0 - m), n_nodes=net.n_nodes,
                             zones=self.patches.labels.ravel(), source_name=net.source_name)

    @cached_property
    def _absorbing_walk(self):
        from ..analyses.absorption import absorbing_walk
        solver = self.study.settings["solver"]
        with self.forward_warnings():
            return absorbing_walk(self.walk_graph, self.mortality, method=solver["method"],
                                  tolerance=solver["tolerance"], source="mortality", where=self.where)

    # -- outputs -------------------------------------------------------------
    def merged_edges(self):
        """(i, j, c): each network edge's end nodes in the graph (zones merged) and its conductance."""
        node = self.graph.node_of_cell.ravel()
        return node[self.network.source], node[self.network.target], self.network.conductance

    def write_raster(self, name, values, *, description, units, per_node=True):
        """On a network: per-node values become a column of the node table (``network_nodes.csv``)."""
        from .. import interrupt
        interrupt.check()
        if not per_node:
            raise self._grid_only(f"the map {name}")
        column = _column_name(name)
        values = np.asarray(values, dtype=float)
        per_network_node = values[self.graph.node_of_cell.ravel()]
        self.node_columns[column] = {"values": per_network_node, "description": description, "units": units,
                                     "analysis": self.step}
        return per_network_node.reshape(1, -1)

    def write_edge_values(self, column, values, *, description, units):
        """A value per network edge: a column of ``network_edges.csv`` and of the GeoPackage's edges."""
        from .. import interrupt
        interrupt.check()
        self.edge_columns[column] = {"values": np.asarray(values, dtype=float), "description": description,
                                     "units": units, "analysis": self.step}

    def quicklook(self, name, array, *, title, units, log_scale=True, categorical=False, kind=None, backdrop=False,
                  marks=None, mark_label="", class_names=None, class_colours=None):
        """A map of the network: edges with widths and colours by their value (when the step wrote a value per
        edge of the same name), else nodes coloured by value."""
        if not self.study.settings["output"]["quicklooks"] or not self.network.has_coordinates:
            return
        from ..maps import network_map
        kind = kind or ("classes" if categorical else "log" if log_scale else "magnitude")
        edge = self.edge_columns.get(_column_name(name))
        path = self._record(name, f"quick-look picture: {title}", units)
        path.parent.mkdir(parents=True, exist_ok=True)
        net = self.network
        marked = None
        if marks is not None:
            indices, other = marks
            marked = [_lines(other)[e] for e in indices]
        network_map(path, net.x, net.y, _lines(net), node_values=None if edge else np.asarray(array).ravel(),
                    edge_values=edge["values"] if edge else None, kind=kind, title=network_words(title),
                    units=network_words(units),
                    marked_lines=marked, mark_label=mark_label,
                    zones=self.patches.labels.ravel(), zone_names=self.patches.id_table, crs=map_crs(net.crs),
                    class_names=class_names)


def _lines(network):
    """Each edge's coordinates as an (n, 2) array (its line, or the straight line between its nodes), made once."""
    if getattr(network, "_lines", None) is None:
        import shapely
        coords, index = shapely.get_coordinates(network.geometry.values, return_index=True)
        network._lines = np.split(coords, np.flatnonzero(np.diff(index)) + 1)
    return network._lines


def _column_name(name):
    """The column a per-node output takes: its file name without folders of pairs and suffix."""
    stem = name.rsplit(".", 1)[0]
    if stem.startswith("pair_maps/"):
        pair, rest = stem[len("pair_maps/"):].split("/", 1)
        return rest if "_before_" in rest else f"{rest}_{pair}"
    return stem.replace("/", "_")


def write_network_outputs(ctx):
    """The network back, with every value the steps wrote: two tables and, with coordinates, a GeoPackage."""
    net = ctx.network
    zone = ctx.patches.labels.ravel()
    names = ctx.patches.id_table
    nodes = pd.DataFrame({"node": net.node_id})
    if net.has_coordinates:
        nodes["x"], nodes["y"] = net.x, net.y
    nodes["zone"] = [names.get(int(z), "") if z else "" for z in zone]
    for column, item in ctx.node_columns.items():
        nodes[column] = item["values"]
    edges = pd.DataFrame({"edge": net.edge_id, "from": net.node_id[net.source], "to": net.node_id[net.target],
                          "resistance": 1.0 / net.conductance, "conductance": net.conductance})
    if net.length is not None:
        edges["length"] = net.length
    for column, item in ctx.edge_columns.items():
        edges[column] = item["values"]
    units = "; ".join(f"{c}: {item['units']}" for c, item in ctx.node_columns.items())
    ctx.write_table("network_nodes.csv", nodes, units=units or "map units",
                    description="one row per network node: its id, coordinates, zone and every per-node value of "
                                "the run (columns named after the quantity)")
    units = "; ".join(f"{c}: {item['units']}" for c, item in ctx.edge_columns.items())
    ctx.write_table("network_edges.csv", edges, units="resistance; conductance; map units" + (f"; {units}" if units else ""),
                    description="one row per network edge (line number or feature id): its end nodes, resistance, "
                                "conductance, length and every per-edge value of the run")
    if not (net.has_coordinates and ctx.study.settings["output"]["map_layers"]):
        return
    import geopandas as gpd
    from ..io.vector_results import write_geopackage
    layers = {"edges": gpd.GeoDataFrame(_text_ids(edges, ("from", "to")), geometry=net.geometry.values, crs=net.crs),
              "nodes": gpd.GeoDataFrame(_text_ids(nodes, ("node",)), geometry=gpd.points_from_xy(net.x, net.y),
                                        crs=net.crs)}
    path = ctx._record("network.gpkg", "the network as GIS layers: edges (lines) and nodes (points) with every value "
                                       "of network_edges.csv and network_nodes.csv", "as the tables")
    import warnings
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*'crs' was not provided")     # an edge list with no CRS given
        write_geopackage(path, layers)


def _text_ids(frame, columns):
    """Text ids as text (a GeoPackage column holds one type)."""
    frame = frame.copy()
    for c in (*columns, "zone"):
        if c in frame.columns and frame[c].dtype == object:
            frame[c] = frame[c].astype(str)
    return frame
