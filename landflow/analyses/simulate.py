"""Monte Carlo simulation of the walk: many seeded walkers, advanced together one hop at a time.

The simulation uses only the hop probabilities P_xy = c_xy / C_x of the graph
and the per-step death probability, never a linear solve, so it is an
independent check of the exact results of :mod:`landflow.analyses.absorption`
on any landscape. It also gives what the solve cannot: the spread of the
number of steps (quantiles).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError
from .absorption import _patch_index, check_mortality, node_crossing_time

__all__ = ["WalkSample", "simulate_walks", "sample_table", "DIED", "UNFINISHED"]

#: Outcome code of a walker that died.
DIED = -1
#: Outcome code of a walker still walking after ``max_steps``.
UNFINISHED = -2

_VISIT_BUFFER = 4_000_000


@dataclass(eq=False)
class WalkSample:
    """Simulated walkers and the estimates drawn from them.

    Attributes
    ----------
    patch_ids : ndarray
        Patch ids of the graph (patch node p is ``patch_ids[p]``).
    absorbing : ndarray of int
        Absorbing patch nodes.
    outcome : ndarray of int, shape (walkers,)
        Patch node where each walker was absorbed, :data:`DIED`, or :data:`UNFINISHED`.
    steps : ndarray of int, shape (walkers,)
        Hops made (the death step counts as one), as in ``expected_steps``.
    time : ndarray, shape (walkers,), or None
        Summed crossing time of the cells visited.
    visit_batches : ndarray, shape (batches, n_nodes), or None
        Mean visits per walker to each node within each batch of walkers.
    """

    patch_ids: np.ndarray
    absorbing: np.ndarray
    outcome: np.ndarray
    steps: np.ndarray
    time: np.ndarray | None = None
    visit_batches: np.ndarray | None = None

    @property
    def walkers(self):
        return self.outcome.size

    @property
    def unfinished(self):
        return int((self.outcome == UNFINISHED).sum())

    def _share(self, hit):
        p = hit.mean()
        return float(p), float(np.sqrt(p * (1 - p) / hit.size))

    def arrival_probability(self):
        """(probability, standard error) of ending at each patch node, arrays of shape (k,)."""
        k = self.patch_ids.size
        counts = np.bincount(self.outcome[self.outcome >= 0], minlength=k)[:k]
        p = counts / self.walkers
        return p, np.sqrt(p * (1 - p) / self.walkers)

    def death_probability(self):
        """(probability, standard error) of dying before absorption."""
        return self._share(self.outcome == DIED)

    def mean_steps(self):
        """(mean, standard error) of the number of steps of finished walkers."""
        return _mean(self.steps[self.outcome != UNFINISHED])

    def mean_time(self):
        """(mean, standard error) of the walk's duration with crossing times."""
        if self.time is None:
            raise InputError("no crossing time was given to the simulation.")
        return _mean(self.time[self.outcome != UNFINISHED])

    def steps_quantiles(self, q=(0.05, 0.25, 0.5, 0.75, 0.95)):
        """Quantiles of the number of steps of finished walkers (inverted empirical distribution)."""
        done = self.steps[self.outcome != UNFINISHED]
        return np.quantile(done, q, method="inverted_cdf") if done.size else np.full(len(q), np.nan)

    def visits(self):
        """(mean, standard error) of the visits to each node per walker; SE from batch means."""
        if self.visit_batches is None:
            raise InputError("visits were not counted; simulate with count_visits=True.")
        b = self.visit_batches
        return b.mean(axis=0), b.std(axis=0, ddof=1) / np.sqrt(b.shape[0])


def _mean(values):
    if values.size < 2:
        return float(np.mean(values)) if values.size else np.nan, np.nan
    return float(values.mean()), float(values.std(ddof=1) / np.sqrt(values.size))


def _hop_table(conductance):
    """Cumulative hop probabilities of every CSR row, offset by the row number.

    Row x's entries run over (x, x + 1], the last exactly x + 1, so one
    ``searchsorted`` of ``x + u`` (u uniform in [0, 1)) draws a neighbour of x
    with probability c_xy / C_x for all walkers at once.
    """
    indptr, indices, data = conductance.indptr, conductance.indices, conductance.data.astype(np.float64)
    n = indptr.size - 1
    row = np.repeat(np.arange(n), np.diff(indptr))
    total = np.bincount(row, weights=data, minlength=n)
    running = np.cumsum(data)
    before = np.concatenate([[0.0], running])[indptr[:-1]]
    with np.errstate(invalid="ignore", divide="ignore"):
        cum = row + (running - before[row]) / total[row]
    last = indptr[1:] - 1
    has = np.diff(indptr) > 0
    cum[last[has]] = np.arange(n)[has] + 1.0
    return cum, indptr, indices, total


def simulate_walks(graph, *, release_patch=None, start_cell=None, absorbing=None, mortality=None,
                   crossing_time=None, walkers=1000, seed=0, max_steps=1_000_000, count_visits=False,
                   batches=20):
    """Simulate independent walkers on ``graph`` until each enters an absorbing patch or dies.

    Each step, every live walker at node x first dies with probability
    kappa_x, and otherwise hops to neighbour y with probability c_xy / C_x.
    All live walkers advance together: one vectorised draw per step.

    Parameters
    ----------
    graph : CellGraph
    release_patch : int, optional
        Patch id: walkers start on that patch node and leave it by a hop
        (returning to it does not stop them). Exactly one of ``release_patch``
        and ``start_cell``.
    start_cell : (row, col), optional
        Walkers start on the node of this cell.
    absorbing : sequence of int, optional
        Patch ids that stop the walk; default every patch except the release patch.
    mortality : ndarray, shape of the grid, optional
        Per-step death probability in [0, 1) of each landscape cell (checked as
        by :func:`landflow.absorbing_walk`); not applied on patch cells.
    crossing_time : ndarray, shape of the grid, optional
        Time (>= 0) added per visit to each non-patch cell.
    walkers : int
    seed : int or numpy.random.Generator
    max_steps : int
        Walkers still walking after this many steps are reported as unfinished.
    count_visits : bool
        Count visits to every node (memory: batches x nodes).
    batches : int
        Batches for the standard errors of the visits.

    Returns
    -------
    WalkSample

    Notes
    -----
    Cost: O(walkers x mean steps x log(edges)) time, O(walkers + edges) memory.
    Walkers that can reach no absorbing patch and cannot die walk until
    ``max_steps``; check :func:`landflow.absorbing_walk`'s warnings first.

    Examples
    --------
    The drunkard's walk from the middle of a 1 x 5 strip ends at either end
    with probability 1/2 and always after an even number of steps.

    >>> import landflow as lf
    >>> graph = lf.build_graph(lf.Grid.from_array([[1.0] * 5]), [[1, 0, 0, 0, 2]])
    >>> sample = simulate_walks(graph, start_cell=(0, 2), walkers=1000, seed=1)
    >>> bool(abs(sample.arrival_probability()[0][0] - 0.5) < 4 * 0.5 / 1000 ** 0.5)
    True
    >>> bool((sample.steps % 2 == 0).all())
    True
    """
    rng = np.random.default_rng(seed)
    k = graph.n_patches
    n = graph.n_nodes
    ids = graph.patch_ids
    if (release_patch is None) == (start_cell is None):
        raise InputError("simulate_walks needs exactly one of release_patch (a patch id) or start_cell (row, col).")
    if not (isinstance(walkers, (int, np.integer)) and walkers >= 2):
        raise InputError(f"walkers must be a whole number >= 2; got {walkers!r}.")

    if release_patch is not None:
        start = _patch_index(graph, release_patch, "release patch")
    else:
        r, c = start_cell
        if not (0 <= r < graph.shape[0] and 0 <= c < graph.shape[1]) or graph.node_of_cell[r, c] < 0:
            raise InputError(f"start cell (row {r}, col {c}) is not a landscape cell (outside the grid, nodata or "
                             "a barrier). Choose a cell inside the landscape.")
        start = int(graph.node_of_cell[r, c])
    is_absorbing = np.zeros(n, dtype=bool)
    if absorbing is None:
        is_absorbing[:k] = True
    else:
        is_absorbing[[_patch_index(graph, p, "absorbing patches") for p in absorbing]] = True
    if release_patch is not None:
        is_absorbing[start] = False

    cells = graph.node_of_cell >= k
    kappa = np.zeros(n)
    if mortality is not None:           # the same checks (shape, [0, 1), first bad cell) as absorbing_walk
        kappa[graph.node_of_cell[cells]] = check_mortality(mortality, graph)[cells]
    tau = None if crossing_time is None else node_crossing_time(graph, crossing_time)

    cum, indptr, indices, total = _hop_table(graph.conductance.tocsr())
    outcome = np.full(walkers, UNFINISHED, dtype=np.int64)
    steps = np.zeros(walkers, dtype=np.int64)
    time = np.zeros(walkers) if tau is not None else None
    batch_of = np.arange(walkers) * batches // walkers
    visit_counts = np.zeros(batches * n) if count_visits else None
    buffer, buffered = [], 0

    if is_absorbing[start]:
        outcome[:] = start
        alive = np.empty(0, dtype=np.int64)
    else:
        alive = np.arange(walkers)
    if alive.size and total[start] == 0:
        raise InputError("the start node has no neighbour: walkers there cannot move.")
    pos = np.full(walkers, start, dtype=np.int64)
    for _ in range(max_steps):
        if alive.size == 0:
            break
        here = pos[alive]
        steps[alive] += 1
        if tau is not None:
            time[alive] += tau[here]
        if count_visits:
            buffer.append(batch_of[alive] * n + here)
            buffered += here.size
            if buffered > _VISIT_BUFFER:
                visit_counts += np.bincount(np.concatenate(buffer), minlength=batches * n)
                buffer, buffered = [], 0
        if mortality is not None:
            dies = rng.random(here.size) < kappa[here]
            outcome[alive[dies]] = DIED
            alive, here = alive[~dies], here[~dies]
        slot = np.searchsorted(cum, here + rng.random(here.size), side="right")
        slot = np.minimum(slot, indptr[here + 1] - 1)
        new = indices[slot]
        pos[alive] = new
        stop = is_absorbing[new]
        outcome[alive[stop]] = new[stop]
        alive = alive[~stop]
    visit_batches = None
    if count_visits:
        if buffer:
            visit_counts += np.bincount(np.concatenate(buffer), minlength=batches * n)
        per_batch = np.bincount(batch_of, minlength=batches)
        visit_batches = visit_counts.reshape(batches, n) / per_batch[:, None]
    return WalkSample(ids, np.flatnonzero(is_absorbing), outcome, steps, time, visit_batches)


def sample_table(sample, release_patch=None):
    """Long-form table of the simulated outcomes with standard errors (for a study's output)."""
    p, se = sample.arrival_probability()
    rows = [("arrival", int(sample.patch_ids[b]), p[b], se[b]) for b in sample.absorbing]
    d, dse = sample.death_probability()
    rows.append(("death", pd.NA, d, dse))
    table = pd.DataFrame(rows, columns=["outcome", "arrival_patch", "simulated_probability", "standard_error"])
    table["arrival_patch"] = table["arrival_patch"].astype("Int64")
    if release_patch is not None:
        table.insert(0, "release_patch", release_patch)
    return table
