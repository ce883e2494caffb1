"""Restoration gain against central finite differences, and Rayleigh's monotonicity law.

The reference effective resistance here is built independently of landflow's graph code
(tests/reference/conftest.py: loops over cells, patch cells merged by relabelling) with a
dense grounded solve.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import landflow as lf
from landflow.analyses.priority import objective_weights, restoration_gain

def reference_resistance(laplacian_of, values, labels, *, kind, rule, neighbours, cell=(1.0, 1.0)):
    """k x k effective resistance from the independently built Laplacian (dense, grounded at patch 0)."""
    lap, k = laplacian_of(values, labels, kind=kind, edge_rule=rule, neighbours=neighbours, cell=cell)
    n = lap.shape[0]
    inv = np.zeros((n, n))
    inv[1:, 1:] = np.linalg.inv(lap[1:, 1:])
    d = np.diag(inv)[:k]
    return d[:, None] + d[None, :] - 2 * inv[:k, :k]


def small_landscape(seed, rows=5, cols=6):
    rng = np.random.default_rng(seed)
    values = rng.uniform(0.5, 5.0, size=(rows, cols))
    labels = np.zeros((rows, cols), dtype=int)
    labels[0, 0] = labels[1, 0] = 1
    labels[rows - 1, cols - 1] = 2
    labels[0, cols - 1] = 3
    return values, labels


@pytest.mark.parametrize("neighbours", [4, 8])
@pytest.mark.parametrize("kind", ["resistance", "conductance"])
@pytest.mark.parametrize("rule", ["mean_resistance", "mean_conductance"])
@pytest.mark.parametrize("objective", ["one_pair", "weighted_sum"])
def test_gain_equals_central_finite_differences(rule, kind, neighbours, objective, build_reference_laplacian):
    # dR_ab/dC_e = -(v_x - v_y)^2: Ghosh, Boyd & Saberi 2008, "Minimizing effective resistance of a
    # graph", SIAM Review 50:37 (formula from memory; confirmed here by central finite differences).
    values, labels = small_landscape(seed=7 + neighbours)
    cell = (2.0, 3.0)
    grid = lf.Grid.from_array(values, cell_size=cell)
    graph = lf.build_graph(grid, labels, kind=kind, neighbours=neighbours, edge_rule=rule)
    voltages = lf.patch_voltages(graph, method="direct")
    if objective == "one_pair":
        weights = objective_weights(voltages, [(0, 2)])
    else:
        weights = np.array([[0.0, 2.0, 0.5], [2.0, 0.0, 1.5], [0.5, 1.5, 0.0]])
    gain = restoration_gain(voltages, grid, weights, kind=kind)

    def objective_value(v):
        r = reference_resistance(build_reference_laplacian, v, labels, kind=kind, rule=rule,
                                 neighbours=neighbours, cell=cell)
        return 0.5 * float((weights * r).sum())

    fd = np.zeros_like(values)
    for r in range(values.shape[0]):
        for c in range(values.shape[1]):
            h = 1e-5 * values[r, c]
            up, down = values.copy(), values.copy()
            up[r, c] += h
            down[r, c] -= h
            fd[r, c] = (objective_value(up) - objective_value(down)) / (2 * h)
    # gain is the drop per unit reduction of resistance (dF/dr), or per unit increase of conductance (-dF/dg)
    expected = fd if kind == "resistance" else -fd
    big = np.abs(expected) > 1e-9 * np.abs(expected).max()
    rel = np.abs(gain[big] - expected[big]) / np.abs(expected[big])
    assert rel.max() < 1e-4
    assert np.all(np.abs(gain[~big]) < 1e-8 * np.abs(expected).max())


def test_gain_is_zero_inside_a_patch():
    # a cell whose every neighbour is in its own patch has only edges with no voltage drop
    values, labels = small_landscape(seed=3, rows=6, cols=7)
    labels[2:5, 2:5] = 4
    grid = lf.Grid.from_array(values)
    voltages = lf.patch_voltages(lf.build_graph(grid, labels))
    gain = restoration_gain(voltages, grid, lf.pair_weights(voltages))
    assert gain[3, 3] == 0.0
    assert gain[2, 2] > 0.0


landscapes = st.tuples(
    st.integers(0, 2**31 - 1), st.integers(3, 6), st.integers(3, 6),
    st.sampled_from(["mean_resistance", "mean_conductance"]), st.sampled_from([4, 8]),
    st.floats(0.05, 0.95),
)


@settings(max_examples=40, deadline=None)
@given(landscapes)
def test_rayleigh_monotonicity(case):
    # Rayleigh's monotonicity law: lowering any resistance never raises an effective resistance
    # (Doyle & Snell 1984, Random Walks and Electric Networks, section 1.4, from memory).
    seed, rows, cols, rule, neighbours, factor = case
    rng = np.random.default_rng(seed)
    values = np.exp(rng.normal(0.0, 1.5, size=(rows, cols)))
    labels = np.zeros((rows, cols), dtype=int)
    labels[0, 0], labels[-1, -1], labels[0, -1] = 1, 2, 3
    cell = (int(rng.integers(rows)), int(rng.integers(cols)))
    lowered = values.copy()
    lowered[cell] *= factor
    grid = lf.Grid.from_array(values)
    voltages = lf.patch_voltages(lf.build_graph(grid, labels, neighbours=neighbours, edge_rule=rule))
    before = lf.effective_resistance(voltages)
    after = lf.effective_resistance(lf.patch_voltages(
        lf.build_graph(lf.Grid.from_array(lowered), labels, neighbours=neighbours, edge_rule=rule)))
    assert np.all(after <= before * (1 + 1e-10))
    # the same law in derivative form: the gain is never negative
    gain = restoration_gain(voltages, grid, lf.pair_weights(voltages))
    assert np.all(gain >= 0.0)
