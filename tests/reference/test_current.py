"""Current between patches: Kirchhoff's laws, a corridor, and networkx's current-flow betweenness."""

import itertools

import networkx as nx
import numpy as np
import pytest

import landflow as lf


def _solve(values, patches, **options):
    cell = options.pop("cell", 10.0)
    graph = lf.build_graph(lf.Grid.from_array(values, cell_size=cell), patches, **options)
    return graph, lf.patch_voltages(graph, method="direct")


def _net_outflow(graph, current):
    """Current leaving each node along the edges of graph.edges (i -> j positive)."""
    i, j, _ = graph.edges
    n = graph.n_nodes
    return np.bincount(i, current, minlength=n) - np.bincount(j, current, minlength=n)


@pytest.mark.parametrize("neighbours", [4, 8])
def test_kirchhoff_current_law(neighbours, landscape):
    # Kirchhoff 1847 (current law): the net current out of a node is the current injected there
    values, valid, patches = landscape(21, rows=8, cols=9, n_patches=4)
    graph, voltages = _solve(np.where(valid, values, np.nan), patches, neighbours=neighbours)
    same = graph.components[:4]
    for a, b in itertools.permutations(range(4), 2):
        if same[a] != same[b]:
            continue
        v = voltages.pair_voltage(a, b)
        assert v[a] == pytest.approx(lf.effective_resistance(voltages)[a, b], rel=1e-10)
        assert v[b] == 0
        out = _net_outflow(graph, lf.edge_current(graph, np.nan_to_num(v)))
        expected = np.zeros(graph.n_nodes)
        expected[a], expected[b] = 1.0, -1.0
        np.testing.assert_allclose(out, expected, atol=1e-10)


def test_unit_current_crosses_every_cut(landscape):
    # a consequence of the current law: the current from S to its complement is the current injected
    # in S, 1 whenever S holds the source and not the sink (Kirchhoff 1847; common practice)
    values, valid, patches = landscape(4, rows=9, cols=9, n_patches=2)
    graph, voltages = _solve(np.where(valid, values, np.nan), patches, neighbours=8)
    assert graph.components[0] == graph.components[1]
    v = voltages.pair_voltage(0, 1)
    i, j, _ = graph.edges
    current = lf.edge_current(graph, v)
    rng = np.random.default_rng(0)
    cuts = [v > level for level in np.quantile(v, [0.1, 0.5, 0.9])]        # level sets of the voltage
    cuts += [rng.random(graph.n_nodes) < 0.5 for _ in range(20)]            # arbitrary sets
    for inside in cuts:
        inside = inside.copy()
        inside[0], inside[1] = True, False
        crossing = current[inside[i] & ~inside[j]].sum() - current[~inside[i] & inside[j]].sum()
        assert crossing == pytest.approx(1.0, abs=1e-10)


@pytest.mark.parametrize("shape, path", [
    ((1, 9), [(0, c) for c in range(9)]),
    ((5, 7), [(2, c) for c in range(7)]),
    ((6, 6), [(r, 1) for r in range(5)] + [(4, c) for c in range(2, 6)]),     # an L, 4 neighbours only
])
def test_one_cell_corridor_carries_one_everywhere(shape, path):
    # Brandes & Fleischer 2005, "Centrality measures based on current flow", STACS: the throughput of a
    # node on a path is the unit current, source and sink included
    values = np.full(shape, np.nan)
    for cell in path:
        values[cell] = 1.0
    rng = np.random.default_rng(1)
    values[~np.isnan(values)] = rng.lognormal(size=len(path))
    patches = np.zeros(shape, dtype=int)
    patches[path[0]], patches[path[-1]] = 1, 2
    neighbours = 4 if shape == (6, 6) else 8
    graph, voltages = _solve(values, patches, neighbours=neighbours)
    flow = lf.pair_current(voltages, 0, 1)
    np.testing.assert_allclose(flow, 1.0, rtol=1e-10)
    cells = graph.to_raster(flow)
    assert np.isnan(cells[np.isnan(values)]).all()


@pytest.mark.parametrize("neighbours, edge_rule", [(8, "mean_resistance"), (4, "mean_conductance")])
def test_throughput_matches_networkx_current_flow_betweenness(neighbours, edge_rule, landscape,
                                                              build_reference):
    """networkx.edge_current_flow_betweenness_centrality_subset(G, [s], [t], normalized=False) gives
    |i_e| / 4 on each edge for a unit current s -> t (networkx source: 0.5 |i_e| per ordered pair, divided
    by 2). Node throughput = (1/2) sum of |i_e| over its edges + 1/2 at s and t (Brandes & Fleischer 2005,
    "Centrality measures based on current flow", STACS). Avoid the node version: it subtracts 1/(n-2)."""
    values, valid, patches = landscape(8, rows=7, cols=8, n_patches=3, n_nodata=0)
    graph, voltages = _solve(values, patches, neighbours=neighbours, edge_rule=edge_rule, cell=(10.0, 12.0))
    reference = build_reference(values, valid, neighbours=neighbours, edge_rule=edge_rule, cell=(10.0, 12.0),
                                patches=patches)
    assert nx.is_connected(reference)
    # landflow node -> reference node name
    name = [None] * graph.n_nodes
    for p, pid in enumerate(graph.patch_ids):
        name[p] = ("patch", int(pid))
    for (r, c), node in np.ndenumerate(graph.node_of_cell):
        if node >= graph.n_patches:
            name[node] = ("cell", r, c)
    for a, b in [(0, 1), (2, 0)]:
        s, t = name[a], name[b]
        edge_value = nx.edge_current_flow_betweenness_centrality_subset(
            reference, [s], [t], normalized=False, weight="conductance")
        throughput = dict.fromkeys(reference.nodes, 0.0)
        for (u, v), value in edge_value.items():
            throughput[u] += 0.5 * 4 * value
            throughput[v] += 0.5 * 4 * value
        throughput[s] += 0.5
        throughput[t] += 0.5
        flow = lf.pair_current(voltages, a, b)
        np.testing.assert_allclose(flow, [throughput[n] for n in name], rtol=1e-8, atol=1e-12)


@pytest.mark.parametrize("with_weights", [False, True])
def test_current_density_is_the_weighted_sum_of_pair_currents(with_weights, landscape, monkeypatch):
    values, valid, patches = landscape(13, rows=8, cols=10, n_patches=4)
    values[:, 5] = np.nan                               # two pieces: some pairs are not connected
    graph, voltages = _solve(values, patches, neighbours=8)
    k = graph.n_patches
    patch_weight = np.random.default_rng(2).uniform(0.5, 3.0, size=k) if with_weights else None
    weights = lf.pair_weights(voltages, patch_weight)
    expected = np.zeros(graph.n_nodes)
    for a, b in itertools.combinations(range(k), 2):
        if voltages.connected(a, b):
            expected += (1.0 if patch_weight is None else patch_weight[a] * patch_weight[b]) * lf.pair_current(voltages, a, b)
        else:
            assert weights[a, b] == 0
    # a small edge block exercises the blocking of the sum as well
    monkeypatch.setattr("landflow.analyses.current.EDGE_BLOCK", 17)
    np.testing.assert_allclose(lf.current_density(voltages, weights), expected, rtol=1e-10, atol=1e-12)
    monkeypatch.undo()
    np.testing.assert_allclose(lf.current_density(voltages, weights), expected, rtol=1e-10, atol=1e-12)


def test_current_density_reads_only_the_pairs_it_sums(landscape):
    # the sum runs over pairs a < b of one piece: a diagonal, a lower triangle or a weight
    # across pieces (where no current flows) must not change it
    values, _, _ = landscape(13, rows=8, cols=10, n_patches=0, n_nodata=0)
    values[:, 5] = np.nan                               # two pieces
    patches = np.zeros(values.shape, dtype=int)
    patches[1, 1], patches[6, 2], patches[2, 8], patches[5, 7:9], patches[7, 9] = 1, 2, 3, 4, 5
    graph, voltages = _solve(values, patches, neighbours=8)
    k = graph.n_patches
    upper = np.triu(np.random.default_rng(3).uniform(0.5, 3.0, size=(k, k)), 1)
    connected = np.array([[voltages.connected(a, b) for b in range(k)] for a in range(k)])
    assert not connected.all()
    expected = np.zeros(graph.n_nodes)
    for a, b in itertools.combinations(range(k), 2):
        if connected[a, b]:
            expected += upper[a, b] * lf.pair_current(voltages, a, b)
    noisy = upper + np.diag(np.full(k, 7.0)) + np.tril(np.full((k, k), 5.0), -1)
    np.testing.assert_allclose(lf.current_density(voltages, noisy), expected, rtol=1e-10, atol=1e-12)
    with pytest.raises(lf.InputError, match=rf"weights must be a {k} x {k} matrix, one row and column per patch; "
                                            r"got shape \(2, 2\)\. Make them with pair_weights"):
        lf.current_density(voltages, np.ones((2, 2)))
    with pytest.raises(lf.InputError, match=rf"patch_weight must hold one number per patch \({k}, in the order of "
                                            r"graph\.patch_ids\); got shape \(3,\)"):
        lf.pair_weights(voltages, [1.0, 2.0, 3.0])
