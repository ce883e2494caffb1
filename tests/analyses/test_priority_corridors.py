"""Corridor extent, pinch points and the cell-level edge list, on landscapes with known answers."""

import numpy as np
import pytest

import landflow as lf
from landflow.analyses.priority import corridor, corridor_cells_table, objective_weights, pair_nodes
from landflow.errors import InputError
from landflow.graph import cell_edges


def parallel_strips():
    """Two one-cell-wide strips joined at their ends by the patches, the lower strip 3x as resistive.

    Unit current splits as in parallel resistors: 3/4 through the upper, 1/4 through the lower
    strip (the parallel rule, common practice), and each strip's cells carry its whole branch current.
    """
    values = np.full((3, 8), np.nan)
    values[0] = 1.0
    values[2] = 3.0
    values[:, 0] = values[:, 7] = [1.0, 1.0, 3.0]
    labels = np.zeros((3, 8), dtype=int)
    labels[:, 0] = 1
    labels[:, 7] = 2
    grid = lf.Grid.from_array(values)
    return grid, lf.patch_voltages(lf.build_graph(grid, labels, neighbours=4))


def test_parallel_strips_split_current_three_to_one():
    grid, voltages = parallel_strips()
    found = corridor(voltages, 0, 1, share=0.75, pinch_share=0.5)
    np.testing.assert_allclose(found.current[0, 1:7], 0.75, rtol=1e-9)
    np.testing.assert_allclose(found.current[2, 1:7], 0.25, rtol=1e-9)
    np.testing.assert_allclose(found.share_of_peak[2, 1:7], 1 / 3, rtol=1e-9)
    assert np.isnan(found.current[:, 0]).all() and np.isnan(found.current[1, 3])
    # the upper strip alone carries exactly 3/4 of the summed current: it is the corridor
    assert found.inside[0, 1:7].all() and not found.inside[2].any()
    assert found.pinch[0, 1:7].all() and found.pinch.sum() == 6
    wider = corridor(voltages, 0, 1, share=0.76, pinch_share=0.8)
    assert wider.inside.sum() == 7 and not wider.pinch.any()


def test_corridor_cells_table_lists_top_cells_with_coordinates():
    grid, voltages = parallel_strips()
    found = corridor(voltages, 0, 1, share=1.0, pinch_share=0.5)
    table = corridor_cells_table(found, grid, voltages.graph.patch_ids, top=8)
    assert len(table) == 8
    assert list(table["row"][:6]) == [0] * 6 and list(table["row"][6:]) == [2, 2]
    np.testing.assert_allclose(table["x"], table["col"] + 0.5)     # unit cells, origin (0, 0)
    np.testing.assert_allclose(table["y"], -(table["row"] + 0.5))
    assert table["pinch_point"][:6].all() and not table["pinch_point"][6:].any()


@pytest.mark.parametrize("value", [0.0, 1.5, -0.1])
def test_share_outside_unit_interval_is_refused(value):
    _, voltages = parallel_strips()
    with pytest.raises(InputError, match=r"share must be in \(0, 1\]"):
        corridor(voltages, 0, 1, share=value)


def test_unknown_pair_and_separate_pieces_are_refused():
    values = np.array([[1.0, 1.0, np.nan, 1.0, 1.0]])
    grid = lf.Grid.from_array(values)
    graph = lf.build_graph(grid, [[1, 0, 0, 2, 3]])
    with pytest.raises(InputError, match="there is no patch 7; the patches are 1, 2, 3"):
        pair_nodes(graph, [(1, 7)])
    with pytest.raises(InputError, match="names? two different patches"):
        pair_nodes(graph, [(2, 2)])
    voltages = lf.patch_voltages(graph)
    with pytest.raises(InputError, match="patches 1 and 2 lie in separate pieces"):
        objective_weights(voltages, pair_nodes(graph, [(1, 2)]))


@pytest.mark.parametrize("kind", ["resistance", "conductance"])
@pytest.mark.parametrize("rule", ["mean_resistance", "mean_conductance"])
def test_cell_edges_sum_to_the_merged_graph(kind, rule):
    rng = np.random.default_rng(1)
    values = rng.uniform(0.5, 3.0, size=(5, 6))
    values[2, 2] = np.nan
    labels = np.zeros((5, 6), dtype=int)
    labels[0, :2] = 1
    labels[4, 5] = 2
    grid = lf.Grid.from_array(values, cell_size=(2.0, 1.0))
    graph = lf.build_graph(grid, labels, kind=kind, edge_rule=rule)
    edges = cell_edges(grid, kind=kind, edge_rule=rule)
    node = graph.node_of_cell.ravel()
    ni, nj = node[edges.cell_i], node[edges.cell_j]
    keep = ni != nj
    import scipy.sparse as sp
    n = graph.n_nodes
    summed = sp.coo_array((edges.conductance[keep], (ni[keep], nj[keep])), shape=(n, n)).toarray()
    np.testing.assert_allclose(summed + summed.T, graph.conductance.toarray(), rtol=1e-12)
    assert set(np.unique(edges.distance).round(6)) == {1.0, 2.0, round(np.sqrt(5.0), 6)}


def test_scenario_change_on_another_grid_is_refused():
    _, voltages = parallel_strips()
    labels = np.zeros((3, 9), dtype=int)
    labels[:, 0], labels[:, 8] = 1, 2
    other = lf.patch_voltages(lf.build_graph(lf.Grid.from_array(np.ones((3, 9))), labels, neighbours=4))
    with pytest.raises(InputError, match=r"the changed landscape has 3 x 9 cells but the present one 3 x 8; both "
                                         r"must lie on the same grid\. Resample"):
        lf.scenario_change(voltages, other, np.ones((2, 2)), np.ones((2, 2)))
