"""Current through cells: per patch pair and summed over pairs."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

__all__ = ["edge_current", "pair_current", "cumulative_current", "pair_weights"]

#: Edges handled at once when summing over pairs; bounds the temporary memory
#: to about EDGE_BLOCK * k * 8 bytes.
EDGE_BLOCK = 262_144


def edge_current(graph, voltage):
    """Current on each edge (i, j) of ``graph.edges``: i_ij = C_ij (v_i - v_j)."""
    i, j, c = graph.edges
    return c * (voltage[i] - voltage[j])


def _throughput(graph, abs_edge_flow):
    """Half the sum of |current| over each node's edges."""
    i, j, _ = graph.edges
    n = graph.n_nodes
    return 0.5 * (np.bincount(i, abs_edge_flow, minlength=n) + np.bincount(j, abs_edge_flow, minlength=n))


def pair_current(voltages, a, b):
    """Current through every node for a unit current from patch a to patch b.

    The current through node x is half the summed absolute current on its
    edges plus half the current injected or extracted there, so a one-cell-wide
    corridor carries 1 along its whole length, source and sink included
    (the throughput of Brandes & Fleischer 2005, "Centrality measures based on
    current flow", STACS, LNCS 3404:533, doi:10.1007/978-3-540-31856-9_44).
    Units: amperes per ampere injected (the share of the flow). Nodes in other
    components carry 0.
    """
    graph = voltages.graph
    v = np.nan_to_num(voltages.pair_voltage(a, b))
    flow = _throughput(graph, np.abs(edge_current(graph, v)))
    flow[a] += 0.5
    flow[b] += 0.5
    return flow


def pair_weights(voltages, strength=None):
    """Weight of every pair: s_a * s_b (1 without strengths), 0 between components."""
    k = voltages.graph.n_patches
    s = np.ones(k) if strength is None else np.asarray(strength, dtype=float)
    w = np.outer(s, s)
    w[voltages.component_of_patch[:, None] != voltages.component_of_patch[None, :]] = 0.0
    np.fill_diagonal(w, 0.0)
    return w


def cumulative_current(voltages, weights=None, *, progress=None):
    """Current through every node summed over all patch pairs, each pair weighted.

    sum over pairs a < b of w_ab * (throughput of node x for unit current a -> b).

    Edge voltage drops are formed once per edge block for all k potentials,
    and every pair's drop is the difference of two columns, so no pair's map
    is ever stored and the cost is O(edges * k^2 / 2) arithmetic.

    Parameters
    ----------
    voltages : PatchVoltages
    weights : ndarray, shape (k, k), optional
        Symmetric pair weights; default :func:`pair_weights` without strengths.
    progress : callable(done, total), optional
    """
    graph = voltages.graph
    k = graph.n_patches
    w = pair_weights(voltages) if weights is None else np.asarray(weights, dtype=float)
    i, j, c = graph.edges
    u = voltages.potential
    edge_sum = np.empty(c.size)
    pairs_of = [(a, np.flatnonzero(w[a, a + 1:]) + a + 1) for a in range(k - 1)]
    for start in range(0, c.size, EDGE_BLOCK):
        stop = min(start + EDGE_BLOCK, c.size)
        drop = u[i[start:stop]] - u[j[start:stop]]          # (block, k)
        total = np.zeros(stop - start)
        for a, others in pairs_of:
            if others.size:
                total += np.abs(drop[:, others] - drop[:, a:a + 1]) @ w[a, others]
        edge_sum[start:stop] = c[start:stop] * total
        if progress:
            progress(stop, c.size)
    flow = _throughput(graph, edge_sum)
    flow[:k] += 0.5 * w.sum(axis=1)
    return flow
