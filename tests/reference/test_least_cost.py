"""Least-cost distance against scipy's Dijkstra, scikit-image's MCP_Geometric and networkx,
each on a graph built here by loops over cells (not by landflow's graph code)."""

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra
from skimage.graph import MCP_Geometric

import landflow as lf
from landflow.analyses.least_cost import least_cost, least_cost_table
from landflow.graph import cell_edges

OFFSETS = {4: [(0, 1), (1, 0)], 8: [(0, 1), (1, 0), (1, 1), (1, -1)]}


def hand_cost_edges(values, mask, neighbours, cell, rule):
    """(i, j, cost) of every neighbour pair of valid cells: cost = 1 / C_ij of the edge rule."""
    rows, cols = values.shape
    width, height = cell
    out = []
    for r in range(rows):
        for c in range(cols):
            if not mask[r, c]:
                continue
            for dr, dc in OFFSETS[neighbours]:
                rr, cc = r + dr, c + dc
                if 0 <= rr < rows and 0 <= cc < cols and mask[rr, cc]:
                    d = np.hypot(dr * height, dc * width)
                    x, y = values[r, c], values[rr, cc]
                    cost = d * (x + y) / 2 if rule == "mean_resistance" else 2 * d / (1 / x + 1 / y)
                    out.append((r * cols + c, rr * cols + cc, cost))
    return out


def two_patch_case(seed, rows=8, cols=10):
    rng = np.random.default_rng(seed)
    values = np.exp(rng.normal(0, 1, size=(rows, cols)))
    values[rng.random((rows, cols)) < 0.1] = np.nan        # some cells outside the landscape
    labels = np.zeros((rows, cols), dtype=int)
    labels[0:2, 0] = 1
    labels[rows - 1, cols - 3:] = 2
    values[labels > 0] = 1.0
    return values, labels


@pytest.mark.parametrize("rule", ["mean_resistance", "mean_conductance"])
@pytest.mark.parametrize("neighbours", [4, 8])
def test_two_patches_equal_scipy_dijkstra_on_hand_built_graph(rule, neighbours):
    values, labels = two_patch_case(seed=neighbours)
    cell = (2.0, 1.5)
    grid = lf.Grid.from_array(values, cell_size=cell)
    graph = lf.build_graph(grid, labels, neighbours=neighbours, edge_rule=rule)
    result = least_cost(graph, cell_edges(grid, neighbours=neighbours, edge_rule=rule))
    i, j, cost = zip(*hand_cost_edges(values, np.isfinite(values), neighbours, cell, rule))
    n = values.size
    matrix = sp.coo_array((cost, (np.asarray(i, np.int32), np.asarray(j, np.int32))), shape=(n, n)).tocsr()
    sources = np.flatnonzero(labels.ravel() == 1)
    dist = dijkstra(matrix, directed=False, indices=sources.astype(np.int32), min_only=True)  # 32-bit: scipy 1.12
    expected = dist[labels.ravel() == 2].min()
    assert np.isfinite(expected)
    assert result.matrix[0, 1] == pytest.approx(expected, rel=1e-12)
    # the cheapest route really costs that much, step by step
    nodes = result.path(0, 1)
    assert nodes[0] == 0 and nodes[-1] == 1


def test_two_patches_equal_mcp_geometric():
    # scikit-image's MCP_Geometric charges a move between neighbours d * (c_i + c_j) / 2,
    # the mean_resistance rule (scikit-image documentation of skimage.graph.MCP_Geometric).
    values, labels = two_patch_case(seed=3)
    costs = np.where(np.isfinite(values), values, np.inf)
    grid = lf.Grid.from_array(values)
    graph = lf.build_graph(grid, labels)
    result = least_cost(graph, cell_edges(grid))
    mcp = MCP_Geometric(costs, fully_connected=True)
    cumulative, _ = mcp.find_costs(starts=list(zip(*np.nonzero(labels == 1))))
    assert result.matrix[0, 1] == pytest.approx(cumulative[labels == 2].min(), rel=1e-12)


def test_several_patches_equal_networkx_with_free_travel_inside_patches():
    rng = np.random.default_rng(9)
    values = np.exp(rng.normal(0, 1, size=(9, 9)))
    labels = np.zeros((9, 9), dtype=int)
    labels[0, 0] = 1
    labels[4, 3:6] = 2            # a stepping stone in the middle: crossing it costs nothing
    labels[8, 8] = 3
    labels[0, 7:9] = 4
    grid = lf.Grid.from_array(values)
    graph = lf.build_graph(grid, labels)
    result = least_cost(graph, cell_edges(grid))
    g = nx.Graph()
    for i, j, cost in hand_cost_edges(values, np.ones_like(labels, bool), 8, (1.0, 1.0), "mean_resistance"):
        g.add_edge(i, j, cost=cost)
    flat = labels.ravel()
    for p in (1, 2, 3, 4):
        cells = np.flatnonzero(flat == p)
        for a, b in zip(cells[:-1], cells[1:]):
            g.add_edge(int(a), int(b), cost=0.0)
    for a in range(4):
        dist = nx.multi_source_dijkstra_path_length(g, set(np.flatnonzero(flat == a + 1).tolist()), weight="cost")
        for b in range(4):
            expected = min(dist[int(c)] for c in np.flatnonzero(flat == b + 1))
            assert result.matrix[a, b] == pytest.approx(expected, rel=1e-12, abs=1e-12)


def test_effective_resistance_never_exceeds_least_cost_distance():
    # One route is a sub-network of the circuit: by Rayleigh's monotonicity law R_ab <= its
    # resistance (Doyle & Snell 1984, section 1.4, from memory); equality on a strip (series rule).
    rng = np.random.default_rng(2)
    values = np.exp(rng.normal(0, 1, size=(6, 8)))
    labels = np.zeros((6, 8), dtype=int)
    labels[0, 0], labels[5, 7], labels[2, 4] = 1, 2, 3
    grid = lf.Grid.from_array(values)
    graph = lf.build_graph(grid, labels)
    voltages = lf.patch_voltages(graph)
    table = least_cost_table(least_cost(graph, cell_edges(grid)), lf.effective_resistance(voltages))
    assert (table["resistance_ratio"] > 0).all() and (table["resistance_ratio"] < 1).all()
    strip = lf.Grid.from_array([[1.0, 2.0, 3.0, 4.0]], cell_size=10.0)
    g = lf.build_graph(strip, [[1, 0, 0, 2]])
    t = least_cost_table(least_cost(g, cell_edges(strip)), lf.effective_resistance(lf.patch_voltages(g)))
    assert t.loc[0, "least_cost_distance"] == pytest.approx(10 * (1.5 + 2.5 + 3.5))
    assert t.loc[0, "resistance_ratio"] == pytest.approx(1.0)
    assert t.loc[0, "path_length"] == pytest.approx(30.0)
    assert t.loc[0, "path_cells"] == 2
