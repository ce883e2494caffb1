"""Absorbing chains with published answers: the drunkard's walk and the gambler's ruin."""

import numpy as np
import pytest
import scipy.sparse as sp

import landflow as lf
from landflow.analyses.absorption import (absorbing_walk, absorption_probability, expected_steps,
                                          expected_visits, hitting_probability, node_source)
from landflow.analyses.simulate import simulate_walks
from landflow.graph import CellGraph


def drunkard_graph():
    """States 0..4 of a 1 x 5 strip; the end cells are patches 1 and 2, so the walk absorbs at both ends."""
    return lf.build_graph(lf.Grid.from_array([[1.0] * 5]), [[1, 0, 0, 0, 2]])


def path_graph(conductances):
    """A path 0..n as a CellGraph built by hand: state 0 is patch 1, state n is patch 2.

    Nodes: 0 = state 0, 1 = state n, 2.. = states 1..n-1. Edge (i, i+1) has conductance conductances[i].
    """
    n = len(conductances)
    node_of_state = np.array([0] + list(range(2, n + 1)) + [1])
    rows, cols, vals = [], [], []
    for i, c in enumerate(conductances):
        a, b = node_of_state[i], node_of_state[i + 1]
        rows += [a, b]
        cols += [b, a]
        vals += [c, c]
    conductance = sp.csr_array((vals, (rows, cols)), shape=(n + 1, n + 1))
    return CellGraph(conductance, node_of_state[None, :].astype(np.int64), np.array([1, 2]), (1, n + 1))


class TestDrunkardsWalk:
    # Kemeny & Snell 1960, Finite Markov Chains, ch. III; Grinstead & Snell 1997, Introduction to
    # Probability, section 11.2 (drunkard's walk, p = 1/2): N = [[3/2,1,1/2],[1,2,1],[1/2,1,3/2]],
    # t = (3, 4, 3), B = [[3/4,1/4],[1/2,1/2],[1/4,3/4]] (that the book prints these exact numbers: from memory;
    # they follow from the definitions).
    N = np.array([[1.5, 1, 0.5], [1, 2, 1], [0.5, 1, 1.5]])
    t = np.array([3.0, 4.0, 3.0])
    B = np.array([[0.75, 0.25], [0.5, 0.5], [0.25, 0.75]])

    def test_fundamental_matrix_rows_from_expected_visits(self):
        graph = drunkard_graph()
        walk = absorbing_walk(graph, method="direct")
        for i, col in enumerate((1, 2, 3)):
            start = np.zeros((1, 5))
            start[0, col] = 1.0
            visits = graph.to_raster(expected_visits(walk, source=node_source(graph, start)), dtype=float)
            np.testing.assert_allclose(visits[0, 1:4], self.N[i], rtol=1e-12)

    def test_expected_steps_and_absorption(self):
        graph = drunkard_graph()
        walk = absorbing_walk(graph, method="direct")
        t = graph.to_raster(expected_steps(walk), dtype=float)[0]
        np.testing.assert_allclose(t[1:4], self.t, rtol=1e-12)
        np.testing.assert_array_equal(t[[0, 4]], 0.0)
        probability, death = absorption_probability(walk)
        cells = np.column_stack([graph.to_raster(probability[:, j], dtype=float)[0] for j in range(2)])
        np.testing.assert_allclose(cells[1:4], self.B, rtol=1e-12)
        np.testing.assert_array_equal(death, 0.0)

    def test_multigrid_agrees(self):
        graph = drunkard_graph()
        walk = absorbing_walk(graph, method="multigrid", tolerance=1e-10)
        t = graph.to_raster(expected_steps(walk), dtype=float)[0]
        np.testing.assert_allclose(t[1:4], self.t, rtol=1e-8)

    def test_biased_walk_p_two_thirds(self):
        # Same definitions with p(right) = 2/3 (REFERENCES.md): t = (3.4, 3.6, 2.2), P(absorbed at 4) =
        # (8/15, 4/5, 14/15). A walk with P(right) = 2/3 has conductances c_{i,i+1} = 2^i.
        graph = path_graph([1.0, 2.0, 4.0, 8.0])
        walk = absorbing_walk(graph, method="direct")
        states = graph.node_of_cell[0, 1:4]
        np.testing.assert_allclose(expected_steps(walk)[states], [3.4, 3.6, 2.2], rtol=1e-12)
        np.testing.assert_allclose(hitting_probability(walk, 2, 1)[states], [8 / 15, 4 / 5, 14 / 15], rtol=1e-12)

    def test_biased_walk_from_a_raster(self):
        # The same chain as a 1 x 5 raster: mean-resistance edges 2 / (r_i + r_{i+1}) = 1, 2, 4, 8 need
        # r_i + r_{i+1} = 2, 1, 1/2, 1/4, e.g. r = (1.375, 0.625, 0.375, 0.125, 0.125).
        graph = lf.build_graph(lf.Grid.from_array([[1.375, 0.625, 0.375, 0.125, 0.125]]), [[1, 0, 0, 0, 2]],
                               neighbours=4)
        walk = absorbing_walk(graph, method="direct")
        t = graph.to_raster(expected_steps(walk), dtype=float)[0]
        np.testing.assert_allclose(t[1:4], [3.4, 3.6, 2.2], rtol=1e-12)

    def test_steps_quantile_of_simulation(self):
        # From the middle state the walk ends after 2 G steps, G geometric with success 1/2 (Grinstead & Snell
        # 1997, section 11.2, from the definitions): P(T <= 6) = 7/8 < 0.9 < P(T <= 8) = 15/16, so the 90 %
        # quantile is 8, and P(T <= 2) = 1/2 puts the 75 % quantile at 4.
        sample = simulate_walks(drunkard_graph(), start_cell=(0, 2), walkers=20_000, seed=7)
        np.testing.assert_array_equal(sample.steps_quantiles((0.75, 0.9)), [4, 8])
        assert np.all(sample.steps % 2 == 0)


class TestGamblersRuin:
    # Feller 1968, An Introduction to Probability Theory and Its Applications, vol. 1, ch. XIV:
    # with r = q/p, P_i(reach N before 0) = (1 - r^i) / (1 - r^N) and the expected duration
    # D_i = i/(q-p) - (N/(q-p)) (1 - r^i)/(1 - r^N) (duration formula from memory).
    @pytest.mark.parametrize("p, n_target", [(0.6, 10), (0.35, 12)])
    def test_closed_form(self, p, n_target):
        q = 1 - p
        r = q / p
        graph = path_graph([(p / q) ** i for i in range(n_target)])
        walk = absorbing_walk(graph, method="direct")
        i = np.arange(1, n_target)
        states = graph.node_of_cell[0, 1:n_target]
        win = (1 - r**i) / (1 - r**n_target)
        np.testing.assert_allclose(hitting_probability(walk, 2, 1)[states], win, rtol=1e-10)
        duration = i / (q - p) - (n_target / (q - p)) * win
        np.testing.assert_allclose(expected_steps(walk)[states], duration, rtol=1e-10)
