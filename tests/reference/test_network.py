"""Networks through the same engine: network_graph against networkx, textbook circuits and the raster path."""

import itertools

import networkx as nx
import numpy as np
import pytest

import landflow as lf
from landflow.analyses.current import edge_current
from landflow.graph import cell_edges


def random_network(seed, n=30, extra=40):
    """A connected random graph: a random spanning tree plus extra edges, conductances log-normal."""
    rng = np.random.default_rng(seed)
    order = rng.permutation(n)
    source = [int(order[i]) for i in range(1, n)]
    target = [int(order[rng.integers(0, i)]) for i in range(1, n)]
    for _ in range(extra):
        a, b = rng.choice(n, 2, replace=False)
        source.append(int(a))
        target.append(int(b))
    conductance = rng.lognormal(0.0, 1.0, len(source))
    return np.array(source), np.array(target), conductance


def reference_graph(source, target, conductance):
    """The same network in networkx, built independently: parallel edges summed as conductances."""
    g = nx.Graph()
    for a, b, c in zip(source, target, conductance):
        if g.has_edge(a, b):
            g[a][b]["conductance"] += c
        else:
            g.add_edge(a, b, conductance=c)
    return g


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_effective_resistance_equals_networkx(seed):
    # networkx.resistance_distance with invert_weight=False reads the weight as a conductance
    # (networkx documentation); zones are single nodes here, so no merging is involved
    source, target, conductance = random_network(seed)
    sites = [3, 11, 17, 25]
    zones = np.zeros(30, dtype=np.int64)
    zones[sites] = np.arange(1, 5)
    r = lf.effective_resistance(lf.patch_voltages(lf.network_graph(source, target, conductance, zones=zones)))
    g = reference_graph(source, target, conductance)
    for (p, a), (q, b) in itertools.combinations(enumerate(sites), 2):
        expected = nx.resistance_distance(g, a, b, weight="conductance", invert_weight=False)
        assert r[p, q] == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize("seed", [3, 4])
def test_edge_currents_equal_networkx_current_flow(seed):
    # networkx.edge_current_flow_betweenness_centrality_subset(G, [s], [t], normalized=False) gives, per edge,
    # |i_e| / 4 for a unit current from s to t (networkx documentation and source, as in test_current.py)
    source, target, conductance = random_network(seed, n=20, extra=25)
    zones = np.zeros(20, dtype=np.int64)
    zones[[2, 15]] = [1, 2]
    graph = lf.network_graph(source, target, conductance, zones=zones)
    voltages = lf.patch_voltages(graph)
    flow = np.abs(edge_current(graph, voltages.pair_voltage(0, 1)))
    node_of = graph.node_of_cell[0]
    ours = {frozenset((int(np.flatnonzero(node_of == i)[0]), int(np.flatnonzero(node_of == j)[0]))): f
            for i, j, f in zip(*graph.edges[:2], flow)}
    g = reference_graph(source, target, conductance)
    reference = nx.edge_current_flow_betweenness_centrality_subset(g, [2], [15], normalized=False,
                                                                    weight="conductance")
    for (a, b), value in reference.items():
        assert ours[frozenset((a, b))] == pytest.approx(4 * value, rel=1e-9, abs=1e-12)


CUBE = [(0, 1), (1, 3), (3, 2), (2, 0), (4, 5), (5, 7), (7, 6), (6, 4), (0, 4), (1, 5), (2, 6), (3, 7)]


@pytest.mark.parametrize("a, b, expected", [(0, 1, 7 / 12), (0, 3, 3 / 4), (0, 7, 5 / 6)])
def test_cube_of_unit_resistors(a, b, expected):
    # A classic textbook exercise (from memory): by symmetry, a unit current from corner 0 to the opposite
    # corner 7 splits 1/3, 1/6, 1/3 along any path of three edges, so R = 1/3 + 1/6 + 1/3 = 5/6; the same
    # symmetry arguments give 3/4 across a face diagonal and 7/12 along an edge.
    source, target = zip(*CUBE)
    zones = np.zeros(8, dtype=np.int64)
    zones[[a, b]] = [1, 2]
    graph = lf.network_graph(source, target, np.ones(12), zones=zones)
    assert lf.effective_resistance(lf.patch_voltages(graph))[0, 1] == pytest.approx(expected, rel=1e-12)


def test_balanced_wheatstone_bridge_carries_no_current_in_its_bridge():
    # Wheatstone bridge: with R1/R2 = R3/R4 the two middle nodes are at one voltage, so the bridge edge
    # carries no current and R = (R1 + R2) || (R3 + R4) (series and parallel rules; common practice)
    r1, r2, r3, r4, bridge = 1.0, 2.0, 3.0, 6.0, 5.0
    source, target = [0, 1, 0, 2, 1], [1, 3, 2, 3, 2]
    conductance = 1.0 / np.array([r1, r2, r3, r4, bridge])
    graph = lf.network_graph(source, target, conductance, zones=[1, 0, 0, 2])
    voltages = lf.patch_voltages(graph)
    current = edge_current(graph, voltages.pair_voltage(0, 1))
    node_of = graph.node_of_cell[0]
    i, j, _ = graph.edges
    on_bridge = (i == node_of[1]) & (j == node_of[2]) | (i == node_of[2]) & (j == node_of[1])
    assert abs(current[on_bridge][0]) < 1e-12
    expected = (r1 + r2) * (r3 + r4) / (r1 + r2 + r3 + r4)
    assert lf.effective_resistance(voltages)[0, 1] == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("rungs", [1, 3, 8])
def test_ladder_network_equals_its_continued_fraction(rungs):
    # A ladder of series resistors s and rungs r, seen from its input: Z_last = r, Z_k = r || (s + Z_(k+1)),
    # R = s + Z_1, a continued fraction (series and parallel rules; common practice).
    s, r = 1.0, 2.0
    source, target, resistance = [], [], []
    # nodes: rails top 0..rungs, bottom rail is one node (rungs + 1), current between top 0 and bottom
    bottom = rungs + 1
    for k in range(rungs):
        source.append(k), target.append(k + 1), resistance.append(s)
    for k in range(1, rungs + 1):
        source.append(k), target.append(bottom), resistance.append(r)
    zones = np.zeros(rungs + 2, dtype=np.int64)
    zones[0], zones[bottom] = 1, 2
    graph = lf.network_graph(source, target, 1.0 / np.array(resistance), zones=zones)
    z = r
    for _ in range(rungs - 1):
        z = r * (s + z) / (r + s + z)
    expected = s + z
    assert lf.effective_resistance(lf.patch_voltages(graph))[0, 1] == pytest.approx(expected, rel=1e-12)


def test_fosters_theorem_on_a_network():
    # Foster 1949: the sum over edges of c_e R_eff(e) equals n - 1 on a connected graph
    source, target, conductance = random_network(7, n=12, extra=10)
    g = reference_graph(source, target, conductance)
    total = 0.0
    for a, b, data in g.edges(data=True):
        zones = np.zeros(12, dtype=np.int64)
        zones[[a, b]] = [1, 2]
        graph = lf.network_graph(source, target, conductance, zones=zones)
        total += data["conductance"] * lf.effective_resistance(lf.patch_voltages(graph))[0, 1]
    assert total == pytest.approx(11, rel=1e-10)


def test_a_raster_and_its_exported_edge_list_agree():
    # the raster's cell-level edges written out as a network, patches as zones: the same circuit
    rng = np.random.default_rng(11)
    grid = lf.Grid.from_array(rng.lognormal(0.0, 0.8, (15, 18)))
    labels = np.zeros((15, 18), dtype=np.int64)
    labels[1:3, 1:4], labels[11:14, 13:16], labels[2, 14], labels[12, 2] = 1, 2, 3, 4
    raster = lf.patch_voltages(lf.build_graph(grid, labels))
    edges = cell_edges(grid)
    network = lf.network_graph(edges.cell_i, edges.cell_j, edges.conductance, n_nodes=grid.shape[0] * grid.shape[1],
                               zones=labels.ravel())
    net = lf.patch_voltages(network)
    np.testing.assert_allclose(lf.effective_resistance(net), lf.effective_resistance(raster), rtol=1e-10)
    np.testing.assert_allclose(network.to_raster(lf.current_density(net), dtype=float)[0],
                               lf.build_graph(grid, labels).to_raster(lf.current_density(raster), dtype=float).ravel(),
                               rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("source, target, conductance, message", [
    ([0, 1], [1, 5], [1.0, 1.0], r"edge 1 joins nodes 1 and 5, but the nodes are numbered 0 to 2"),
    ([0, 1], [1, 1], [1.0, 1.0], r"edge 1 joins node 1 to itself"),
    ([0, 1], [1, 2], [1.0, 0.0], r"edge 1 \(nodes 1-2\) has conductance 0\.0; an edge's conductance must be finite"),
    ([0, 1], [1, 2], [np.inf, 1.0], r"edge 0 \(nodes 0-1\) has conductance inf"),
])
def test_bad_edges_are_named(source, target, conductance, message):
    with pytest.raises(lf.InputError, match=r"roads\.csv: " + message):
        lf.network_graph(source, target, conductance, n_nodes=3, source_name="roads.csv")


def test_parallel_edges_add_as_conductances():
    graph = lf.network_graph([0, 0, 1], [1, 1, 0], [1.0, 2.0, 0.5], zones=[1, 2])
    assert lf.effective_resistance(lf.patch_voltages(graph))[0, 1] == pytest.approx(1 / 3.5, rel=1e-12)
