"""Escape probability and commute time against a seeded simulation of the walk.

The simulation shares no code with landflow's solve: it only uses hop
probabilities P_xy = c_xy / C_x read from the networkx graph built cell by cell
in tests/reference/conftest.py. Agreement is judged in standard errors
(REFERENCES.md: "Not circular, not invented").
"""

import networkx as nx
import numpy as np
import pytest

import landflow as lf

WALKERS = 20_000


def _setup(landscape, build_reference, seed):
    values, valid, patches = landscape(seed, rows=5, cols=6, n_patches=3, n_nodata=2)
    cell = (10.0, 15.0)
    graph = lf.build_graph(lf.Grid.from_array(np.where(valid, values, np.nan), cell_size=cell), patches)
    table = lf.resistance_table(lf.patch_voltages(graph, method="direct"))
    reference = build_reference(values, valid, cell=cell, patches=patches)
    assert nx.is_connected(reference)
    nodes = list(reference.nodes)
    conductance = nx.to_numpy_array(reference, nodelist=nodes, weight="conductance")
    hop = conductance / conductance.sum(axis=1, keepdims=True)
    return table, nodes, np.cumsum(hop, axis=1), conductance.sum() / 2


def _walk_until(rng, cumulative, start, targets):
    """Positions of walkers started at ``start`` (array) after they first hit ``targets`` (bool per node),
    and the number of steps taken. Each walker takes at least one step."""
    position = start.copy()
    steps = np.zeros(position.size, dtype=np.int64)
    active = np.arange(position.size)
    while active.size:
        u = rng.random(active.size)
        row = cumulative[position[active]]
        nxt = np.minimum((row < u[:, None]).sum(axis=1), row.shape[1] - 1)
        position[active] = nxt
        steps[active] += 1
        active = active[~targets[nxt]]
    return position, steps


@pytest.mark.parametrize("seed", [3, 5])
def test_escape_probability_matches_simulation(seed, landscape, build_reference):
    # P_a(reach b before returning to a) = 1 / (C_a R_ab): Doyle & Snell 1984, Random Walks and Electric
    # Networks, section 1.3.4 (from memory); Blum, Hopcroft & Kannan 2020, Foundations of Data Science
    table, nodes, cumulative, _ = _setup(landscape, build_reference, seed)
    rng = np.random.default_rng(seed)
    for row in table.itertuples():
        for source, sink, expected in [(row.patch_a, row.patch_b, row.escape_probability_a_to_b),
                                       (row.patch_b, row.patch_a, row.escape_probability_b_to_a)]:
            a, b = nodes.index(("patch", source)), nodes.index(("patch", sink))
            stop = np.zeros(len(nodes), dtype=bool)
            stop[[a, b]] = True
            end, _ = _walk_until(rng, cumulative, np.full(WALKERS, a), stop)
            estimate = np.mean(end == b)
            standard_error = np.sqrt(expected * (1 - expected) / WALKERS)
            assert 0 < expected < 1
            assert abs(estimate - expected) < 4 * standard_error, (source, sink, estimate, expected)


def test_commute_time_matches_simulation(landscape, build_reference):
    # E_a[steps to b and back to a] = 2 (sum of edge conductances) R_ab: Chandra, Raghavan, Ruzzo,
    # Smolensky & Tiwari 1996, "The electrical resistance of a graph captures its commute and cover
    # times", Computational Complexity 6:312
    table, nodes, cumulative, total = _setup(landscape, build_reference, 3)
    rng = np.random.default_rng(11)
    walkers = 4_000
    row = table.iloc[0]
    a, b = nodes.index(("patch", row.patch_a)), nodes.index(("patch", row.patch_b))
    to_b = np.zeros(len(nodes), dtype=bool)
    to_b[b] = True
    at_b, out = _walk_until(rng, cumulative, np.full(walkers, a), to_b)
    assert (at_b == b).all()
    to_a = np.zeros(len(nodes), dtype=bool)
    to_a[a] = True
    _, back = _walk_until(rng, cumulative, at_b, to_a)
    commute = out + back
    standard_error = commute.std(ddof=1) / np.sqrt(walkers)
    assert row.commute_time == pytest.approx(2 * total * row.resistance, rel=1e-12)
    assert abs(commute.mean() - row.commute_time) < 4 * standard_error, (commute.mean(), row.commute_time)
