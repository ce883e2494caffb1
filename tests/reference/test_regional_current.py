"""Regional current (ring nodes around a buffered window) against networkx and landflow's own current density."""

import networkx as nx
import numpy as np
import pytest

import landflow as lf
from landflow.analyses.regional import ring_current, ring_nodes, ring_offset
from landflow.errors import InputError


def _perimeter_cells(rows, cols):
    """The outer ring of a rows x cols box, clockwise from the top-left corner, by walking it cell by cell."""
    cells = [(0, c) for c in range(cols)]
    cells += [(r, cols - 1) for r in range(1, rows)]
    cells += [(rows - 1, c) for c in range(cols - 2, -1, -1)]
    cells += [(r, 0) for r in range(rows - 2, 0, -1)]
    return cells


@pytest.mark.parametrize("shape,k,offset", [((3, 3), 4, 0.0), ((7, 12), 9, 0.37), ((40, 25), 32, 0.9)])
def test_ring_nodes_follow_the_perimeter_walk(shape, k, offset):
    walk = _perimeter_cells(*shape)
    rows, cols = ring_nodes(shape, k, offset)
    expected = [walk[int(np.floor((offset + i) * len(walk) / k))] for i in range(k)]
    assert list(zip(rows.tolist(), cols.tolist())) == expected
    assert len(set(expected)) == k


def test_ring_nodes_refuse_too_many_nodes():
    with pytest.raises(InputError, match="between 2 and the ring's 8 cells"):
        ring_nodes((3, 3), 9)


def test_placement_is_reproducible_from_the_seed():
    assert ring_offset(5) == ring_offset(5)
    assert ring_offset(5) != ring_offset(6)
    assert 0.0 <= ring_offset(123) < 1.0


def _networkx_throughput(values, k, offset, cell):
    """Cell throughput summed over ring pairs from networkx, on a graph built here cell by cell.

    ``edge_current_flow_betweenness_centrality_subset(normalized=False)`` gives (1/4) sum over ordered
    (s, t) of |i_e| (REFERENCES.md, networkx documentation and source): with sources = targets = the ring
    nodes that is (1/2) sum over unordered pairs. Throughput of a cell (Brandes & Fleischer 2005, "Centrality
    measures based on current flow", STACS) is half the summed |i| on its edges plus half the current it
    injects or extracts: (k - 1) / 2 at each ring node.
    """
    rows, cols = values.shape
    graph = nx.Graph()
    for r in range(rows):
        for c in range(cols):
            for dr, dc in ((0, 1), (1, 0), (1, 1), (1, -1)):
                rr, cc = r + dr, c + dc
                if 0 <= rr < rows and 0 <= cc < cols:
                    d = cell * np.hypot(dr, dc)
                    graph.add_edge((r, c), (rr, cc), conductance=1.0 / (d * (values[r, c] + values[rr, cc]) / 2))
    walk = _perimeter_cells(rows, cols)
    ring = [walk[int(np.floor((offset + i) * len(walk) / k))] for i in range(k)]
    edge = nx.edge_current_flow_betweenness_centrality_subset(graph, ring, ring, normalized=False,
                                                              weight="conductance")
    out = np.zeros((rows, cols))
    for (a, b), value in edge.items():
        out[a] += value
        out[b] += value
    for node in ring:
        out[node] += 0.5 * (k - 1)
    return out


def test_ring_current_equals_networkx_current_flow():
    rng = np.random.default_rng(3)
    values = np.exp(rng.normal(0.0, 0.8, (7, 8)))
    buffer_value, b, k, offset, cell = 2.5, 2, 6, 0.4, 10.0
    grid = lf.Grid.from_array(values, cell_size=cell)
    flow, _ = ring_current(grid, buffer_cells=b, k=k, buffer_value=buffer_value, offset=offset, method="superlu")
    padded = np.pad(values, b, constant_values=buffer_value)
    expected = _networkx_throughput(padded, k, offset, cell)
    np.testing.assert_allclose(flow, expected, rtol=1e-9, atol=1e-12)


def test_ring_current_is_current_density_with_ring_nodes_as_point_patches():
    """The regional map is landflow's current density with each ring node a one-cell patch (to 1e-10)."""
    rng = np.random.default_rng(4)
    values = np.exp(rng.normal(0.0, 1.0, (30, 41)))
    mask = np.ones(values.shape, bool)
    mask[10:13, 5:9] = False                       # a lake inside: a barrier
    grid = lf.Grid(np.where(mask, values, -1.0), mask)
    b, k, offset, fill = 4, 12, 0.7, 1.7
    flow, _ = ring_current(grid, buffer_cells=b, k=k, buffer_value=fill, offset=offset)
    padded = np.pad(np.where(mask, values, fill), b, constant_values=fill)
    padded_mask = np.pad(mask, b, constant_values=True)
    labels = np.zeros(padded.shape, dtype=np.int64)
    walk = _perimeter_cells(*padded.shape)
    for i in range(k):
        labels[walk[int(np.floor((offset + i) * len(walk) / k))]] = i + 1
    graph = lf.build_graph(lf.Grid(padded, padded_mask), labels)
    expected = graph.to_raster(lf.current_density(lf.patch_voltages(graph)), dtype=np.float64)
    np.testing.assert_allclose(flow, expected, rtol=1e-10, atol=0)
    assert np.isnan(flow[b + 11, b + 6])


def test_uniform_core_flattens_as_the_buffer_widens():
    """On a uniform landscape the map's spread falls as the buffer widens (docs/regional.md's table)."""
    n = 40
    grid = lf.Grid.from_array(np.ones((n, n)))
    spread = []
    for b in (1, 5, 20):
        flow, _ = ring_current(grid, buffer_cells=b, k=16, buffer_value=1.0, offset=0.5)
        core = flow[b:b + n, b:b + n]
        spread.append(core.std() / core.mean())
    assert spread[0] > spread[1] > spread[2]
    assert spread[2] < 0.1


def test_scaling_every_resistance_leaves_the_current_unchanged():
    """Current is a share of the injected unit current: multiplying all resistances by c changes no current."""
    rng = np.random.default_rng(5)
    values = np.exp(rng.normal(0.0, 1.0, (15, 15)))
    a, _ = ring_current(lf.Grid.from_array(values), buffer_cells=3, k=8, buffer_value=1.0)
    b, _ = ring_current(lf.Grid.from_array(7.0 * values), buffer_cells=3, k=8, buffer_value=7.0)
    np.testing.assert_allclose(a, b, rtol=1e-9)


def test_bad_buffer_is_refused():
    grid = lf.Grid.from_array(np.ones((5, 5)))
    with pytest.raises(InputError, match="at least one cell wide"):
        ring_current(grid, buffer_cells=0, k=4, buffer_value=1.0)
    with pytest.raises(InputError, match="finite number above 0"):
        ring_current(grid, buffer_cells=2, k=4, buffer_value=-1.0)
