"""Patch voltages, the resistance matrix and the long table: shapes, units and pieces."""

import numpy as np
import pytest

import landflow as lf


@pytest.fixture
def two_pieces():
    values = np.random.default_rng(4).lognormal(size=(5, 9))
    values[:, 4] = np.nan                       # a nodata column splits the landscape
    patches = np.zeros((5, 9), dtype=int)
    patches[0, 0], patches[4, 2], patches[2, 7], patches[1, 8] = 2, 4, 6, 8
    graph = lf.build_graph(lf.Grid.from_array(values, cell_size=30.0), patches)
    return graph, lf.patch_voltages(graph, method="direct")


def test_matrix_is_symmetric_with_zero_diagonal_and_inf_between_pieces(two_pieces):
    graph, voltages = two_pieces
    r = lf.effective_resistance(voltages)
    assert (r == r.T).all() and (np.diag(r) == 0).all()
    np.testing.assert_array_equal(np.isinf(r), [[0, 0, 1, 1], [0, 0, 1, 1], [1, 1, 0, 0], [1, 1, 0, 0]])
    assert (r[np.isfinite(r) & (r > 0)] > 0).all()
    assert len(voltages.solvers) == 2               # one factorisation per piece holding patches


def test_pair_voltage(two_pieces):
    graph, voltages = two_pieces
    r = lf.effective_resistance(voltages)
    v = voltages.pair_voltage(0, 1)
    assert v[1] == 0 and v[0] == pytest.approx(r[0, 1], rel=1e-12)
    assert np.isnan(v[graph.components != graph.components[0]]).all()
    finite = v[~np.isnan(v)]
    assert finite.min() >= -1e-12 and finite.max() <= v[0] * (1 + 1e-12)   # maximum principle
    with pytest.raises(lf.InputError, match="patches 2 and 6 are not connected: no current flows between them"):
        voltages.pair_voltage(0, 2)


def test_resistance_table(two_pieces):
    graph, voltages = two_pieces
    table = lf.resistance_table(voltages)
    assert list(table.columns) == ["patch_a", "patch_b", "resistance", "escape_probability_a_to_b",
                                   "escape_probability_b_to_a", "commute_time"]
    assert list(zip(table.patch_a, table.patch_b)) == [(2, 4), (2, 6), (2, 8), (4, 6), (4, 8), (6, 8)]
    unconnected = np.isinf(table.resistance)
    assert unconnected.sum() == 4
    assert (table.escape_probability_a_to_b[unconnected] == 0).all()
    assert np.isinf(table.commute_time[unconnected]).all()
    ok = table[~unconnected]
    assert ((ok.escape_probability_a_to_b > 0) & (ok.escape_probability_a_to_b < 1)).all()


def test_grounded_solves_do_not_depend_on_the_ground(two_pieces):
    # relabelling the patches changes which patch is grounded; R must not change
    graph, voltages = two_pieces
    r = lf.effective_resistance(voltages)
    labels = np.zeros(graph.shape, dtype=int)
    relabel = {2: 9, 4: 1, 6: 3, 8: 2}
    for node, pid in enumerate(graph.patch_ids):
        labels[graph.node_of_cell == node] = relabel[int(pid)]
    values = np.random.default_rng(4).lognormal(size=(5, 9))
    values[:, 4] = np.nan
    again = lf.build_graph(lf.Grid.from_array(values, cell_size=30.0), labels)
    r2 = lf.effective_resistance(lf.patch_voltages(again, method="direct"))
    order = [list(again.patch_ids).index(relabel[int(p)]) for p in graph.patch_ids]
    np.testing.assert_allclose(r2[np.ix_(order, order)], r, rtol=1e-10)


def test_solver_backends_give_the_same_resistance(two_pieces):
    graph, voltages = two_pieces
    multigrid = lf.patch_voltages(graph, method="multigrid", tolerance=1e-12)
    np.testing.assert_allclose(lf.effective_resistance(multigrid), lf.effective_resistance(voltages), rtol=1e-6)


def test_isolated_patch_escapes_with_probability_zero():
    # patch 3 is a single cell walled in by nodata: it has no edges at all
    values = np.ones((3, 5))
    values[:, 3] = np.nan
    values[0, 4] = values[2, 4] = np.nan
    patches = np.zeros((3, 5), dtype=int)
    patches[0, 0], patches[2, 2], patches[1, 4] = 1, 2, 3
    graph = lf.build_graph(lf.Grid.from_array(values), patches)
    table = lf.resistance_table(lf.patch_voltages(graph))
    isolated = table[table.patch_b == 3]
    assert np.isinf(isolated.resistance).all() and np.isinf(isolated.commute_time).all()
    assert (isolated.escape_probability_a_to_b == 0).all() and (isolated.escape_probability_b_to_a == 0).all()
    assert not table.isna().any().any()


@pytest.mark.parametrize("threads, rows", [(1, 10**6), (1, 37), (3, 37), (2, 500)])
def test_residual_check_on_bands_of_rows_is_the_norm_of_the_laplacian_residual(threads, rows, monkeypatch):
    # _worst_residual sums squared residuals band by band on several threads; against the residual
    # formed whole with the Laplacian, max_j ||L x_j - e_source_j|| off the ground node, for potentials
    # perturbed so that the residuals are far from zero
    from landflow.analyses import resistance
    values = np.random.default_rng(11).lognormal(size=(25, 30))
    labels = np.zeros(values.shape, dtype=np.int64)
    labels[2, 3], labels[20, 25], labels[12, 5], labels[4, 27] = 1, 2, 3, 4
    graph = lf.build_graph(lf.Grid.from_array(values), labels)
    voltages = lf.patch_voltages(graph, method="superlu")
    potential = voltages.potential + np.random.default_rng(3).normal(scale=1e-3, size=voltages.potential.shape)
    monkeypatch.setattr(resistance, "compute_threads", lambda: threads)
    monkeypatch.setattr(resistance, "RESIDUAL_ROWS", rows)
    sources, columns = np.array([1, 3]), np.array([1, 3])
    got = resistance._worst_residual(graph, potential, 0, sources, columns)
    laplacian = graph.laplacian().toarray()
    worst = 0.0
    for source, column in zip(sources, columns):
        r = laplacian @ potential[:, column]
        r[source] -= 1.0
        r[0] = 0.0
        worst = max(worst, np.linalg.norm(r))
    assert worst > 1e-3
    assert got == pytest.approx(worst, rel=1e-12)
