"""Effective resistance between patches against networkx.resistance_distance.

Reference: networkx documentation, ``resistance_distance(G, a, b, weight,
invert_weight=False)`` with the weight a conductance (Klein & Randic 1993,
"Resistance distance", J. Math. Chem. 12:81). The networkx graph is built cell
by cell in tests/reference/conftest.py, independently of landflow.graph.
"""

import itertools

import networkx as nx
import numpy as np
import pytest

import landflow as lf


def _landflow_resistance(values, valid, patches, *, kind, neighbours, edge_rule, cell):
    grid = lf.Grid.from_array(np.where(valid, values, np.nan), cell_size=cell)
    graph = lf.build_graph(grid, patches, kind=kind, neighbours=neighbours, edge_rule=edge_rule)
    return graph, lf.effective_resistance(lf.patch_voltages(graph, method="direct"))


def _check_against_networkx(values, valid, patches, *, kind, neighbours, edge_rule, cell, build_reference):
    graph, resistance = _landflow_resistance(values, valid, patches, kind=kind, neighbours=neighbours,
                                             edge_rule=edge_rule, cell=cell)
    reference = build_reference(values, valid, kind=kind, neighbours=neighbours, edge_rule=edge_rule,
                                cell=cell, patches=patches)
    ids = list(graph.patch_ids)
    assert ids == sorted(set(np.unique(patches)) - {0})
    assert graph.n_nodes == reference.number_of_nodes()
    component = {n: i for i, nodes in enumerate(nx.connected_components(reference)) for n in nodes}
    for (a, pa), (b, pb) in itertools.combinations(enumerate(ids), 2):
        u, v = ("patch", int(pa)), ("patch", int(pb))
        if component[u] != component[v]:
            assert resistance[a, b] == np.inf
            continue
        piece = reference.subgraph(nx.node_connected_component(reference, u))
        expected = nx.resistance_distance(piece, u, v, weight="conductance", invert_weight=False)
        assert resistance[a, b] == pytest.approx(expected, rel=1e-9)
        assert resistance[b, a] == resistance[a, b]
    assert np.all(np.diag(resistance) == 0)


@pytest.mark.parametrize("seed", [1, 2, 3])
@pytest.mark.parametrize("neighbours", [4, 8])
@pytest.mark.parametrize("edge_rule", ["mean_resistance", "mean_conductance"])
def test_resistance_surface_matches_networkx(seed, neighbours, edge_rule, build_reference, landscape):
    values, valid, patches = landscape(seed, n_patches=2 + seed % 3)   # 2, 3 or 4 patches
    # non-square cells: 30 m wide, 20 m high
    _check_against_networkx(values, valid, patches, kind="resistance", neighbours=neighbours,
                            edge_rule=edge_rule, cell=(30.0, 20.0), build_reference=build_reference)


@pytest.mark.parametrize("neighbours", [4, 8])
@pytest.mark.parametrize("edge_rule", ["mean_resistance", "mean_conductance"])
def test_conductance_surface_with_barriers_matches_networkx(neighbours, edge_rule, build_reference, landscape):
    values, valid, patches = landscape(11, rows=6, cols=9, n_patches=3)
    values = 1.0 / values
    values[valid & (patches == 0) & (np.arange(values.size).reshape(values.shape) % 7 == 0)] = 0.0  # barriers
    _check_against_networkx(values, valid, patches, kind="conductance", neighbours=neighbours,
                            edge_rule=edge_rule, cell=(25.0, 40.0), build_reference=build_reference)


def test_separated_pieces_have_infinite_resistance(build_reference):
    # a full nodata column splits the landscape; patches 1, 2 left, 3 right (4 neighbours and 8 alike)
    values = np.random.default_rng(5).lognormal(size=(4, 7))
    valid = np.ones_like(values, dtype=bool)
    valid[:, 3] = False
    patches = np.zeros((4, 7), dtype=int)
    patches[0, 0:2], patches[3, 1], patches[2, 5:7] = 1, 2, 3
    for neighbours in (4, 8):
        _check_against_networkx(values, valid, patches, kind="resistance", neighbours=neighbours,
                                edge_rule="mean_resistance", cell=(10.0, 10.0), build_reference=build_reference)
    _, resistance = _landflow_resistance(values, valid, patches, kind="resistance", neighbours=8,
                                         edge_rule="mean_resistance", cell=(10.0, 10.0))
    assert np.isfinite(resistance[0, 1]) and np.isinf(resistance[0, 2]) and np.isinf(resistance[1, 2])
