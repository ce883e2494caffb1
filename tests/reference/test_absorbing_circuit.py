"""Absorbing-walk results against dense numpy solves built independently of landflow's graph code."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import landflow as lf
from landflow.analyses.absorption import (absorbing_walk, absorption_probability, arrival_table, expected_steps,
                                          expected_visits, hitting_probability)


def dense_network(resistance, labels):
    """Conductances of an 8-neighbour raster of unit cells, built by loops (edge 2 / (d (r_i + r_j))).

    Returns (W, state_of_cell, patch_state) where each patch is merged into one state.
    """
    rows, cols = resistance.shape
    ids = sorted(int(v) for v in np.unique(labels) if v != 0)
    patch_state = {p: s for s, p in enumerate(ids)}
    state_of_cell = np.zeros((rows, cols), dtype=int)
    n = len(ids)
    for r in range(rows):
        for c in range(cols):
            if labels[r, c]:
                state_of_cell[r, c] = patch_state[int(labels[r, c])]
            else:
                state_of_cell[r, c] = n
                n += 1
    W = np.zeros((n, n))
    for r in range(rows):
        for c in range(cols):
            for dr, dc in ((0, 1), (1, 0), (1, 1), (1, -1)):
                rr, cc = r + dr, c + dc
                if 0 <= rr < rows and 0 <= cc < cols:
                    a, b = state_of_cell[r, c], state_of_cell[rr, cc]
                    if a != b:
                        d = np.hypot(dr, dc)
                        w = 2.0 / (d * (resistance[r, c] + resistance[rr, cc]))
                        W[a, b] += w
                        W[b, a] += w
    return W, state_of_cell, patch_state


def dense_chain(W, absorbing, kappa):
    """Fundamental-matrix quantities from hop probabilities with death kappa (Kemeny & Snell 1960, ch. III):
    Q = (1 - kappa) P on transient states, N = (I - Q)^-1, B = N R, death = N kappa, t = N 1."""
    n = W.shape[0]
    P = W / W.sum(axis=1, keepdims=True)
    T = np.setdiff1d(np.arange(n), absorbing)
    Q = (1 - kappa[T])[:, None] * P[np.ix_(T, T)]
    R = (1 - kappa[T])[:, None] * P[np.ix_(T, absorbing)]
    N = np.linalg.inv(np.eye(T.size) - Q)
    return T, N, N @ R, N @ kappa[T], N @ np.ones(T.size)


def landscape(seed, shape=(5, 6)):
    rng = np.random.default_rng(seed)
    resistance = rng.lognormal(0.0, 0.8, shape)
    labels = np.zeros(shape, dtype=int)
    labels[0, 0] = labels[1, 0] = 1
    labels[-1, -1] = 2
    labels[0, -1] = 3
    return resistance, labels


def cells(graph, values):
    return graph.to_raster(values, dtype=float)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_hitting_probability_is_the_voltage(seed):
    # Doyle & Snell 1984, Random Walks and Electric Networks, ch. 1: P_x(A before B) is the voltage with A at 1
    # and B at 0 (other patches are ordinary nodes); here a dense numpy solve of the Kirchhoff equations.
    resistance, labels = landscape(seed)
    graph = lf.build_graph(lf.Grid.from_array(resistance), labels)
    W, state, patch = dense_network(resistance, labels)
    L = np.diag(W.sum(axis=1)) - W
    a, b = patch[1], patch[2]
    free = np.setdiff1d(np.arange(W.shape[0]), [a, b])
    v = np.zeros(W.shape[0])
    v[a] = 1.0
    v[free] = np.linalg.solve(L[np.ix_(free, free)], -L[np.ix_(free, [a])] @ [1.0])
    h = hitting_probability(absorbing_walk(graph), 1, 2)
    np.testing.assert_allclose(cells(graph, h), v[state], atol=1e-10)


@pytest.mark.parametrize("seed", [3, 4])
def test_killing_both_ways(seed):
    # Killing (REFERENCES.md, derived from the definitions, checked both ways): a per-step death probability
    # kappa_x is the same walk as (1) an extra conductance C_x kappa_x / (1 - kappa_x) to an absorbing ground
    # and (2) hop probabilities (1 - kappa_x) P_xy with death kappa_x (Kemeny & Snell 1960, ch. III).
    resistance, labels = landscape(seed)
    rng = np.random.default_rng(seed + 100)
    mortality = rng.uniform(0, 0.4, resistance.shape)
    graph = lf.build_graph(lf.Grid.from_array(resistance), labels)
    walk = absorbing_walk(graph, mortality)
    probability, death = absorption_probability(walk)
    steps = expected_steps(walk)

    W, state, patch = dense_network(resistance, labels)
    n = W.shape[0]
    kappa = np.zeros(n)
    free_cells = labels == 0
    kappa[state[free_cells]] = mortality[free_cells]
    absorbing = np.array([patch[p] for p in (1, 2, 3)])

    # way 2: the chain with death straight from the hop probabilities
    T, N, B, d, t = dense_chain(W, absorbing, kappa)
    expect_b = np.zeros((n, 3))
    expect_b[absorbing, np.arange(3)] = 1.0
    expect_b[T] = B
    expect_d = np.zeros(n)
    expect_d[T] = d
    expect_t = np.zeros(n)
    expect_t[T] = t
    for j in range(3):
        np.testing.assert_allclose(cells(graph, probability[:, j]), expect_b[state, j], atol=1e-10)
    np.testing.assert_allclose(cells(graph, death), expect_d[state], atol=1e-10)
    np.testing.assert_allclose(cells(graph, steps), expect_t[state], rtol=1e-9)

    # way 1: no death, but a ground state joined to each x by C_x kappa_x / (1 - kappa_x), absorbing
    C = W.sum(axis=1)
    g = C * kappa / (1 - kappa)
    W1 = np.zeros((n + 1, n + 1))
    W1[:n, :n] = W
    W1[:n, n] = W1[n, :n] = g
    T1, _, B1, _, _ = dense_chain(W1, np.append(absorbing, n), np.zeros(n + 1))
    np.testing.assert_allclose(B1[:, -1], d, atol=1e-10)           # absorbed in the ground = died
    np.testing.assert_allclose(B1[:, :3], B, atol=1e-10)


@pytest.mark.parametrize("mortality", [0.0, 0.1])
def test_absorption_plus_death_sums_to_one(mortality):
    # Kemeny & Snell 1960, ch. III: rows of B (with death as one more absorbing state) sum to 1.
    resistance, labels = landscape(5, shape=(12, 15))
    graph = lf.build_graph(lf.Grid.from_array(resistance), labels)
    walk = absorbing_walk(graph, np.full(resistance.shape, mortality))
    probability, death = absorption_probability(walk)
    np.testing.assert_allclose(probability.sum(axis=1) + death, 1.0, atol=1e-10)
    table = arrival_table(walk)
    np.testing.assert_allclose(table.groupby("release_patch")["probability"].sum(), 1.0, atol=1e-10)
    if mortality == 0:
        assert (table.loc[table.outcome == "death", "probability"] == 0).all()


@pytest.mark.parametrize("n_patches", [2, 3])
def test_visits_over_conductance_is_the_voltage(n_patches):
    # Lyons & Peres 2016, Probability on Trees and Networks, ch. 2 (proposition number from memory); Doyle &
    # Snell 1984: for the walk from a stopped on reaching the target, E[visits to x] / C_x = v_x, the voltage for
    # a unit current from a to the target with the target grounded. With three patches the target is both others.
    resistance, labels = landscape(6)
    if n_patches == 2:
        labels[labels == 3] = 0
    graph = lf.build_graph(lf.Grid.from_array(resistance), labels)
    visits = expected_visits(absorbing_walk(graph), release_patch=1)
    W, state, patch = dense_network(resistance, labels)
    L = np.diag(W.sum(axis=1)) - W
    targets = [patch[p] for p in patch if p != 1]
    free = np.setdiff1d(np.arange(W.shape[0]), targets)
    rhs = np.zeros(free.size)
    rhs[np.searchsorted(free, patch[1])] = 1.0
    v = np.zeros(W.shape[0])
    v[free] = np.linalg.solve(L[np.ix_(free, free)], rhs)
    C = W.sum(axis=1)
    expect = np.where(np.isin(np.arange(W.shape[0]), targets), 0.0, v * C)
    np.testing.assert_allclose(cells(graph, visits), expect[state], rtol=1e-9, atol=1e-12)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), rows=st.integers(2, 6), cols=st.integers(2, 6),
       top=st.sampled_from([0.0, 0.05, 0.6]))
def test_probabilities_sum_to_one_property(seed, rows, cols, top):
    # Kemeny & Snell 1960, ch. III: absorption into each patch plus death sums to 1 from every transient state.
    rng = np.random.default_rng(seed)
    resistance = rng.lognormal(0.0, 1.0, (rows, cols))
    labels = np.zeros((rows, cols), dtype=int)
    labels[0, 0] = 1
    labels[-1, -1] = 2
    graph = lf.build_graph(lf.Grid.from_array(resistance), labels)
    walk = absorbing_walk(graph, rng.uniform(0.0, top, (rows, cols)))
    probability, death = absorption_probability(walk)
    np.testing.assert_allclose(probability.sum(axis=1) + death, 1.0, atol=1e-9)
    assert (probability >= -1e-12).all() and (death >= -1e-12).all()
