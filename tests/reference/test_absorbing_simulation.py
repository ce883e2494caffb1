"""Every absorbing-walk analysis against a seeded simulation of the walk, within 4 standard errors.

The simulation (landflow.analyses.simulate) uses only the hop probabilities c_xy / C_x and the death
probability; it shares no code with the linear solves ("Not circular" in REFERENCES.md: a Monte Carlo
simulation of the walk, seeded, judged in standard errors).
"""

import numpy as np
import pytest

import landflow as lf
from landflow.analyses.absorption import (absorbing_walk, absorption_probability, arrival_table, expected_steps,
                                          expected_visits, hitting_probability, node_crossing_time, node_source,
                                          release_expected_steps)
from landflow.analyses.simulate import simulate_walks

WALKERS = 20_000
Z = 4.0


def landscape():
    rng = np.random.default_rng(11)
    resistance = rng.lognormal(0.0, 0.7, (5, 6))
    labels = np.zeros((5, 6), dtype=int)
    labels[0, 0] = labels[0, 1] = 1
    labels[4, 5] = 2
    labels[0, 5] = 3
    crossing = rng.uniform(0.5, 3.0, (5, 6))
    return lf.build_graph(lf.Grid.from_array(resistance), labels), crossing


def mortality_map(on):
    return np.random.default_rng(12).uniform(0.0, 0.3, (5, 6)) if on else None


def close(simulated, se, exact):
    simulated, se, exact = map(np.asarray, (simulated, se, exact))
    # where the simulation saw no spread the exact value must match (e.g. 0 for unreachable outcomes)
    ok = np.abs(simulated - exact) <= Z * se + 1e-12
    assert ok.all(), (simulated[~ok], se[~ok], exact[~ok])


@pytest.mark.parametrize("with_mortality", [False, True])
class TestAgainstSimulation:
    def test_from_a_cell(self, with_mortality):
        graph, crossing = landscape()
        mortality = mortality_map(with_mortality)
        walk = absorbing_walk(graph, mortality)
        x = int(graph.node_of_cell[2, 3])
        sample = simulate_walks(graph, start_cell=(2, 3), mortality=mortality, crossing_time=crossing,
                                walkers=WALKERS, seed=1, count_visits=True)
        assert sample.unfinished == 0
        probability, death = absorption_probability(walk)
        p, se = sample.arrival_probability()
        close(p, se, probability[x])
        close(*sample.death_probability(), death[x])
        close(*sample.mean_steps(), expected_steps(walk)[x])
        tau = node_crossing_time(graph, crossing)
        close(*sample.mean_time(), expected_steps(walk, tau)[x])
        start = np.zeros((5, 6))
        start[2, 3] = 1.0
        close(*sample.visits(), expected_visits(walk, source=node_source(graph, start)))

    def test_hitting_a_before_b(self, with_mortality):
        graph, _ = landscape()
        mortality = mortality_map(with_mortality)
        walk = absorbing_walk(graph, mortality)
        x = int(graph.node_of_cell[4, 1])
        sample = simulate_walks(graph, start_cell=(4, 1), absorbing=[1, 2], mortality=mortality,
                                walkers=WALKERS, seed=2)
        p, se = sample.arrival_probability()
        close(p[0], se[0], hitting_probability(walk, 1, 2)[x])
        sample = simulate_walks(graph, start_cell=(4, 1), mortality=mortality, walkers=WALKERS, seed=3)
        p, se = sample.arrival_probability()
        close(p[2], se[2], hitting_probability(walk, 3)[x])

    def test_released_from_a_patch(self, with_mortality):
        graph, crossing = landscape()
        mortality = mortality_map(with_mortality)
        walk = absorbing_walk(graph, mortality)
        sample = simulate_walks(graph, release_patch=1, mortality=mortality, crossing_time=crossing,
                                walkers=WALKERS, seed=4, count_visits=True)
        table = arrival_table(walk)
        rows = table[table.release_patch == 1]
        p, se = sample.arrival_probability()
        for _, row in rows[rows.outcome == "arrival"].iterrows():
            b = int(np.flatnonzero(graph.patch_ids == row.arrival_patch)[0])
            close(p[b], se[b], row.probability)
        close(*sample.death_probability(), rows.loc[rows.outcome == "death", "probability"].iloc[0])
        steps = release_expected_steps(walk, node_crossing_time(graph, crossing)).set_index("release_patch")
        close(*sample.mean_steps(), steps.loc[1, "expected_steps"])
        close(*sample.mean_time(), steps.loc[1, "expected_time"])
        close(*sample.visits(), expected_visits(walk, release_patch=1))
