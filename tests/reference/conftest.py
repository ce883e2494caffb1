"""An independent reference: the conductance graph of a raster built cell by cell in networkx.

This shares no code with ``landflow.graph``: it loops over cells, applies the
edge rules exactly as DESIGN.md writes them, and merges patch cells by
relabelling nodes (summing the conductances of parallel edges).

* mean_resistance: C_ij = 1 / (d * (r_i + r_j) / 2)
* mean_conductance: C_ij = (g_i + g_j) / (2 d)

with d the distance between cell centres (cell width, cell height, or the
diagonal).
"""

import math

import networkx as nx
import numpy as np
import pytest


def reference_graph(values, valid, *, kind="resistance", neighbours=8, edge_rule="mean_resistance",
                    cell=(1.0, 1.0), patches=None):
    """Build a networkx Graph with edge attribute ``conductance``.

    Nodes are ("cell", row, col) for free cells and ("patch", id) for patches.
    Cells with conductance 0 (kind="conductance") are barriers and left out.
    """
    values = np.asarray(values, dtype=float)
    valid = np.asarray(valid, dtype=bool)
    rows, cols = values.shape
    width, height = cell
    offsets = [(0, 1, width), (1, 0, height)]
    if neighbours == 8:
        diagonal = math.hypot(width, height)
        offsets += [(1, 1, diagonal), (1, -1, diagonal)]

    def node_ok(r, c):
        if not (0 <= r < rows and 0 <= c < cols) or not valid[r, c]:
            return False
        return kind == "resistance" or values[r, c] > 0

    def resistance(r, c):
        return values[r, c] if kind == "resistance" else 1.0 / values[r, c]

    def name(r, c):
        if patches is not None and patches[r][c] != 0:
            return ("patch", int(patches[r][c]))
        return ("cell", r, c)

    graph = nx.Graph()
    for r in range(rows):
        for c in range(cols):
            if not node_ok(r, c):
                continue
            graph.add_node(name(r, c))
            for dr, dc, d in offsets:
                r2, c2 = r + dr, c + dc
                if not node_ok(r2, c2):
                    continue
                ri, rj = resistance(r, c), resistance(r2, c2)
                if edge_rule == "mean_resistance":
                    conductance = 1.0 / (d * (ri + rj) / 2.0)
                else:
                    conductance = (1.0 / ri + 1.0 / rj) / (2.0 * d)
                u, v = name(r, c), name(r2, c2)
                if u == v:          # both cells in one patch: no internal resistance
                    continue
                if graph.has_edge(u, v):   # parallel edges of a merged patch add up
                    graph[u][v]["conductance"] += conductance
                else:
                    graph.add_edge(u, v, conductance=conductance)
    return graph


@pytest.fixture
def build_reference():
    return reference_graph


def reference_laplacian(values, labels, *, kind="resistance", edge_rule="mean_resistance", neighbours=8,
                        cell=(1.0, 1.0)):
    """Dense Laplacian of :func:`reference_graph` (every cell valid), patch nodes first in id order.

    Returns (laplacian, k) with k the number of patches.
    """
    labels = np.asarray(labels)
    graph = reference_graph(values, np.ones(labels.shape, bool), kind=kind, neighbours=neighbours,
                            edge_rule=edge_rule, cell=cell, patches=labels)
    patches = [("patch", int(p)) for p in sorted(np.unique(labels[labels != 0]))]
    order = patches + sorted(n for n in graph.nodes if n[0] == "cell")
    laplacian = nx.laplacian_matrix(graph, nodelist=order, weight="conductance").toarray()
    return laplacian, len(patches)


@pytest.fixture(scope="session")
def build_reference_laplacian():
    return reference_laplacian


def random_landscape(seed, rows=7, cols=8, n_patches=3, n_nodata=4):
    """Log-normal resistance, a few nodata cells and ``n_patches`` patches of 2-3 cells on valid cells."""
    rng = np.random.default_rng(seed)
    values = rng.lognormal(0.0, 1.0, size=(rows, cols))
    valid = np.ones((rows, cols), dtype=bool)
    cells = rng.permutation(rows * cols)
    valid.reshape(-1)[cells[:n_nodata]] = False
    values[~valid] = np.nan
    patches = np.zeros((rows, cols), dtype=int)
    free = cells[n_nodata:]
    taken = 0
    for p in range(1, n_patches + 1):
        size = int(rng.integers(2, 4))
        patches.reshape(-1)[free[taken:taken + size]] = 10 * p   # labels need not be 1..k
        taken += size
    return values, valid, patches


@pytest.fixture
def landscape():
    return random_landscape
