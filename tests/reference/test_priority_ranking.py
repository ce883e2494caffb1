"""Corridor ranking: the Kron-reduced link network and the connectivity lost with each link.

References are built independently of landflow's graph code (the cell-by-cell Laplacian of tests/reference/conftest.py, numpy Schur
complement, networkx on the reduced network).
"""

import networkx as nx
import numpy as np
import pytest

import landflow as lf
from landflow.analyses.priority import connectivity, corridor_ranking, link_conductance

@pytest.fixture(scope="module")
def case(build_reference_laplacian):
    rng = np.random.default_rng(11)
    values = np.exp(rng.normal(0, 1, size=(7, 9)))
    labels = np.zeros((7, 9), dtype=int)
    labels[0, 0:2] = 1
    labels[6, 0] = 2
    labels[3, 4] = 3
    labels[0, 8] = 4
    labels[6, 7:9] = 5
    voltages = lf.patch_voltages(lf.build_graph(lf.Grid.from_array(values), labels))
    lap, k = build_reference_laplacian(values, labels)   # 8 neighbours, mean_resistance, unit cells
    # Kron reduction onto the patch nodes: the Schur complement S = L_PP - L_PF L_FF^-1 L_FP
    # (Dörfler & Bullo 2013, "Kron reduction of graphs with applications to electrical networks",
    # IEEE Trans. Circuits and Systems I 60:150).
    schur = lap[:k, :k] - lap[:k, k:] @ np.linalg.solve(lap[k:, k:], lap[k:, :k])
    return voltages, schur, k


def reduced_graph(c):
    g = nx.Graph()
    k = c.shape[0]
    g.add_nodes_from(range(k))
    for a in range(k):
        for b in range(a + 1, k):
            if c[a, b] > 0:
                g.add_edge(a, b, conductance=c[a, b])
    return g


def nx_resistance(g, k):
    r = np.zeros((k, k))
    for a in range(k):
        for b in range(a + 1, k):
            if nx.has_path(g, a, b):
                r[a, b] = r[b, a] = nx.resistance_distance(g, a, b, weight="conductance", invert_weight=False)
            else:
                r[a, b] = r[b, a] = np.inf
    return r


def test_link_conductance_is_the_schur_complement(case):
    voltages, schur, k = case
    expected = -schur.copy()
    np.fill_diagonal(expected, 0.0)
    np.testing.assert_allclose(link_conductance(voltages), expected, rtol=1e-9, atol=1e-12)


def test_reduced_network_keeps_every_effective_resistance(case):
    # Kron reduction preserves effective resistance among the kept nodes (Dörfler & Bullo 2013);
    # the reduced network's resistances come from networkx.resistance_distance.
    voltages, _, k = case
    r_nx = nx_resistance(reduced_graph(link_conductance(voltages)), k)
    np.testing.assert_allclose(r_nx, lf.effective_resistance(voltages), rtol=1e-8)


def test_connectivity_drop_equals_networkx_without_the_link(case):
    voltages, _, k = case
    rng = np.random.default_rng(5)
    s = rng.uniform(1, 4, size=k)
    weights = lf.pair_weights(voltages, s)
    c = link_conductance(voltages)
    table = corridor_ranking(voltages, weights)
    total = connectivity(lf.effective_resistance(voltages), weights)
    ids = list(voltages.graph.patch_ids)
    for row in table.itertuples():
        a, b = ids.index(row.patch_a), ids.index(row.patch_b)
        g = reduced_graph(c)
        g.remove_edge(a, b)
        r_without = nx_resistance(g, k)
        assert row.connectivity_drop == pytest.approx(total - connectivity(r_without, weights), rel=1e-7)
        assert row.resistance_without_link == pytest.approx(r_without[a, b], rel=1e-7)
        assert row.connectivity_drop_share == pytest.approx(row.connectivity_drop / total)
    assert list(table["rank"]) == list(range(1, len(table) + 1))
    assert table["connectivity_drop"].is_monotonic_decreasing


def test_link_current_matches_networkx_edge_current_flow(case):
    # networkx.edge_current_flow_betweenness_centrality_subset(normalized=False) returns
    # (1/4) sum over ordered (s, t) of |i_e| with unit current s -> t (networkx documentation
    # and source), i.e. half the sum over unordered pairs; ranking's link_current with unit
    # weights is that sum over unordered pairs on the reduced network.
    voltages, _, k = case
    c = link_conductance(voltages)
    g = reduced_graph(c)
    flow = nx.edge_current_flow_betweenness_centrality_subset(
        g, list(range(k)), list(range(k)), normalized=False, weight="conductance")
    table = corridor_ranking(voltages)
    ids = list(voltages.graph.patch_ids)
    for row in table.itertuples():
        a, b = ids.index(row.patch_a), ids.index(row.patch_b)
        edge = flow.get((a, b), flow.get((b, a)))
        assert row.link_current == pytest.approx(2.0 * edge, rel=1e-7)


def test_bridge_link_cuts_the_pair():
    # patch 2 is reachable only through patch 1 (a ring of patch 1 around it): the reduced
    # network has no link 2-3, and losing link 1-2 separates 2 from every patch.
    values = np.ones((5, 7))
    labels = np.zeros((5, 7), dtype=int)
    labels[0:3, 0:3] = 1
    labels[1, 1] = 2
    labels[4, 6] = 3
    voltages = lf.patch_voltages(lf.build_graph(lf.Grid.from_array(values), labels))
    c = link_conductance(voltages)
    assert c[1, 2] == pytest.approx(0.0, abs=1e-12)
    table = corridor_ranking(voltages).set_index(["patch_a", "patch_b"])
    r = lf.effective_resistance(voltages)
    # without link 1-2, pairs (1,2) and (2,3) are cut: the drop is their whole share 1/R12 + 1/R23
    assert table.loc[(1, 2), "connectivity_drop"] == pytest.approx(1 / r[0, 1] + 1 / r[1, 2], rel=1e-9)
    assert np.isinf(table.loc[(1, 2), "resistance_without_link"])
    assert table.loc[(1, 2), "direct_share"] == pytest.approx(1.0)
    assert table.loc[(2, 3), "link_conductance"] == pytest.approx(0.0, abs=1e-12)
