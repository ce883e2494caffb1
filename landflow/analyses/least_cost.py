"""Least-cost distance and least-cost paths between patches, on the circuit's own edges."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra

from ..errors import InputError

__all__ = ["LeastCost", "least_cost", "least_cost_table"]


@dataclass(eq=False)
class LeastCost:
    """Cheapest single routes from every patch to every node.

    Attributes
    ----------
    graph : CellGraph
    distance : ndarray, shape (k, n_nodes)
        Least cost from patch ``a`` (row) to every node; ``inf`` where no
        route exists. ``distance[:, :k]`` is the patch-to-patch matrix.
    predecessors : ndarray of int, shape (k, n_nodes)
        The node before each node on the cheapest route from patch ``a``;
        -9999 at ``a`` itself and where no route exists.
    step_length : scipy.sparse.csr_array, shape (n_nodes, n_nodes)
        Centre distance (map units) of the cell edge each cheapest step uses.
    """

    graph: object
    distance: np.ndarray
    predecessors: np.ndarray
    step_length: sp.csr_array
    _paths: dict = field(default_factory=dict, init=False, repr=False)

    @property
    def matrix(self):
        """The k x k matrix of least-cost distance between patches (0 on the diagonal)."""
        k = self.graph.n_patches
        return self.distance[:, :k].copy()

    def path(self, a, b):
        """Nodes of the cheapest route from patch a to patch b, a first; empty when none exists.

        Each route is traced once and kept: the table, the route count and the
        per-pair maps all ask for the same routes.
        """
        key = (int(a), int(b))
        if key not in self._paths:
            nodes = []
            if np.isfinite(self.distance[a, b]):
                nodes, pred = [b], self.predecessors[a]
                while nodes[-1] != a:
                    nodes.append(int(pred[nodes[-1]]))
            route = np.array(nodes[::-1], dtype=np.int64)
            route.flags.writeable = False
            self._paths[key] = route
        return self._paths[key]

    def path_length(self, nodes):
        """Length in map units of a route given as consecutive nodes."""
        if len(nodes) < 2:
            return 0.0
        return float(self.step_length[nodes[:-1], nodes[1:]].sum())

    def path_count(self, pairs=None):
        """How many pairs' cheapest routes pass each node (their end patches included)."""
        k = self.graph.n_patches
        pairs = [(a, b) for a in range(k) for b in range(a + 1, k)] if pairs is None else pairs
        count = np.zeros(self.graph.n_nodes)
        for a, b in pairs:
            count[self.path(a, b)] += 1
        return count


def least_cost(graph, edges):
    """Least-cost distance from every patch over the cell edges of the circuit.

    Moving along the cell edge between neighbours i and j costs the edge's
    resistance 1 / C_ij, the same edge rule as the circuit: with
    ``mean_resistance`` that is d (r_i + r_j) / 2 (resistance per unit length
    times length), with ``mean_conductance`` 2 d / (g_i + g_j). A patch is one
    node, as in the circuit: entering any of its cells reaches the patch, and
    crossing another patch costs nothing inside it. Between a patch and a
    neighbouring cell the cheapest of the cell edges joining them is used
    (the circuit adds them in parallel instead).

    Because a single route is a sub-network of the whole circuit, Rayleigh's
    monotonicity law gives R_ab <= least-cost distance(a, b), with equality
    when only one route exists (Doyle & Snell 1984, Random Walks and Electric
    Networks, MAA, section 1.4).

    Parameters
    ----------
    graph : CellGraph
    edges : CellEdges
        From :func:`landflow.graph.cell_edges` with the graph's settings.

    Returns
    -------
    LeastCost

    Notes
    -----
    Dijkstra's algorithm (:func:`scipy.sparse.csgraph.dijkstra`) from each of
    the k patch nodes: O(k (E + n log n)) time, O(k n) memory.
    Units: resistance unit x map unit, as effective resistance.
    """
    node_flat = graph.node_of_cell.reshape(-1)
    ni, nj = node_flat[edges.cell_i], node_flat[edges.cell_j]
    if (ni < 0).any() or (nj < 0).any():
        raise InputError("the cell edges do not belong to this graph; build both from the same grid and settings.")
    keep = ni != nj
    lo, hi = np.minimum(ni, nj)[keep], np.maximum(ni, nj)[keep]
    cost = 1.0 / edges.conductance[keep]
    length = edges.distance[keep]
    n = graph.n_nodes
    key = lo * n + hi
    order = np.lexsort((cost, key))
    first = np.ones(order.size, dtype=bool)
    first[1:] = key[order][1:] != key[order][:-1]
    pick = order[first]
    index = np.int32 if n < 2**31 else np.int64      # csgraph of scipy < 1.13 takes 32-bit indices only
    rows = np.concatenate([lo[pick], hi[pick]]).astype(index)
    cols = np.concatenate([hi[pick], lo[pick]]).astype(index)
    cost_graph = sp.csr_array((np.concatenate([cost[pick], cost[pick]]), (rows, cols)), shape=(n, n))
    step_length = sp.csr_array((np.concatenate([length[pick], length[pick]]), (rows, cols)), shape=(n, n))
    k = graph.n_patches
    distance, predecessors = dijkstra(cost_graph, directed=True, indices=np.arange(k), return_predecessors=True)
    return LeastCost(graph, distance, predecessors, step_length)


def least_cost_table(result, resistance=None):
    """One row per patch pair: least-cost distance, route length and cells, and R / least cost.

    Columns: ``patch_a, patch_b, least_cost_distance, path_length, path_cells``
    and, given the effective resistance matrix, ``effective_resistance`` and
    ``resistance_ratio`` = R_ab / least-cost distance, in (0, 1]: 1 when the
    cheapest route is the only one, small when many routes share the flow.
    ``path_cells`` counts the non-patch cells on the route.
    """
    graph = result.graph
    k = graph.n_patches
    a, b = np.triu_indices(k, 1)
    lengths, cells = [], []
    for x, y in zip(a, b):
        nodes = result.path(x, y)
        lengths.append(result.path_length(nodes) if nodes.size else np.inf)
        cells.append(int((nodes >= k).sum()) if nodes.size else 0)
    table = pd.DataFrame({"patch_a": graph.patch_ids[a], "patch_b": graph.patch_ids[b],
                          "least_cost_distance": result.distance[a, b],
                          "path_length": lengths, "path_cells": cells})
    if resistance is not None:
        r = resistance[a, b]
        table["effective_resistance"] = r
        with np.errstate(invalid="ignore"):
            table["resistance_ratio"] = np.where(np.isfinite(r), r / table["least_cost_distance"], np.nan)
    return table
