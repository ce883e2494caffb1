"""Current through cells: per patch pair and summed over pairs."""

from __future__ import annotations

import threading

import numpy as np

from ..errors import InputError
from ..solve import compute_threads, on_threads, one_blas_thread

__all__ = ["edge_current", "pair_current", "current_density", "edge_current_density", "pair_weights"]

#: Sets the edges handled at once when summing over pairs: EDGE_BLOCK * 16 / k
#: edges, so each (edges x k) temporary holds about 64 k numbers (0.5 MB) whatever k: small enough to stay
#: in the cache and to be reused from the heap block after block, where temporaries of 32 MB each took
#: fresh pages (0.62 s against 0.42 s for the 1000 x 1000 benchmark's 4 million edges and 20 patches).
EDGE_BLOCK = 4096


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


def pair_weights(voltages, patch_weight=None):
    """Weight of every pair: w_a * w_b (1 without patch weights), 0 between components and on the diagonal.

    ``patch_weight`` holds one number per patch, in the order of ``graph.patch_ids``;
    another length raises :class:`~landflow.errors.InputError`.
    """
    k = voltages.graph.n_patches
    s = np.ones(k) if patch_weight is None else np.asarray(patch_weight, dtype=float)
    if s.shape != (k,):
        raise InputError(f"patch_weight must hold one number per patch ({k}, in the order of graph.patch_ids); "
                         f"got shape {s.shape}.")
    w = np.outer(s, s)
    w[voltages.component_of_patch[:, None] != voltages.component_of_patch[None, :]] = 0.0
    np.fill_diagonal(w, 0.0)
    return w


def current_density(voltages, weights=None, *, progress=None):
    """Current through every node summed over all patch pairs, each pair weighted.

    sum over pairs a < b of w_ab * (throughput of node x for unit current a -> b).

    The voltage drop across edge e for the pair (a, b) is d_a - d_b, with d_a
    the drop of patch a's potential (column a of ``voltages.potential``), so
    the edge's summed current is c_e * sum_{a<b} w_ab |d_a - d_b|. When the
    weights have the product form w_ab = s_a s_b within each connected
    component (as :func:`pair_weights` makes them), sorting the k drops of an
    edge gives that sum in O(k log k) instead of O(k^2):
    with the drops in increasing order d_(1) <= ... <= d_(k),

        sum_{a<b} s_a s_b |d_a - d_b| = sum_i s_(i) d_(i) (S_below(i) - S_above(i)),

    S_below and S_above being the summed patch weights before and after position i
    (the rank identity behind the Gini mean difference, e.g. David 1968,
    "Miscellanea: Gini's mean difference rediscovered", Biometrika 55:573,
    doi:10.1093/biomet/55.3.573). Other weights use the direct pairwise sum.
    Edges are handled in blocks, so no pair's map is ever stored.

    Parameters
    ----------
    voltages : PatchVoltages
    weights : ndarray, shape (k, k), optional
        Pair weights; default :func:`pair_weights` without patch weights. Only
        the pairs a < b are read (``weights[a, b]``), and pairs in different
        connected components carry no current whatever their weight.
    progress : callable(done, total), optional

    Notes
    -----
    Cost: O(edges * k log k) with product-form weights, O(edges * k^2 / 2)
    otherwise; a few temporaries of EDGE_BLOCK * 16 numbers each (0.5 MB).
    """
    graph = voltages.graph
    k = graph.n_patches
    w = _checked_weights(voltages, weights)
    edge_sum = _edge_sums(voltages, w, *graph.edges, progress=progress)
    flow = _throughput(graph, edge_sum)
    flow[:k] += 0.5 * w.sum(axis=1)
    return flow


def edge_current_density(voltages, weights=None, *, edges=None, progress=None):
    """Current on every edge summed over all patch pairs, each pair weighted: sum_{a<b} w_ab |i_e^ab|.

    The per-edge counterpart of :func:`current_density` (whose node values are
    half the sum of these over each node's edges, plus the injected currents).

    Parameters
    ----------
    voltages : PatchVoltages
    weights : ndarray (k, k), optional
        As for :func:`current_density`.
    edges : (i, j, c), optional
        End nodes (of ``voltages.graph``) and conductance of each edge; default
        ``graph.edges``. A network's own edges may repeat a pair of nodes
        (parallel edges) or lie inside a patch (those carry 0).

    Returns
    -------
    ndarray, one value per edge: amperes for unit currents between the pairs.
    """
    w = _checked_weights(voltages, weights)
    i, j, c = voltages.graph.edges if edges is None else edges
    return _edge_sums(voltages, w, np.asarray(i), np.asarray(j), np.asarray(c, dtype=float), progress=progress)


def _checked_weights(voltages, weights):
    k = voltages.graph.n_patches
    if weights is None:
        w = pair_weights(voltages)
    else:
        w = np.asarray(weights, dtype=float)
        if w.shape != (k, k):
            raise InputError(f"weights must be a {k} x {k} matrix, one row and column per patch; "
                             f"got shape {w.shape}. Make them with pair_weights(voltages, patch_weight).")
        w = np.triu(w, 1)                       # the pairs a < b, mirrored: the sum's own terms
        w = w + w.T
        w[voltages.component_of_patch[:, None] != voltages.component_of_patch[None, :]] = 0.0
    return w


def _edge_sums(voltages, w, i, j, c, *, progress=None):
    """c_e * sum_{a<b} w_ab |d_a - d_b| for every edge (see :func:`current_density`)."""
    k = voltages.graph.n_patches
    u = voltages.potential
    edge_sum = np.empty(c.size)
    groups = _product_groups(voltages.component_of_patch, w)
    pairs_of = [(a, np.flatnonzero(w[a, a + 1:]) + a + 1) for a in range(k - 1)]
    block = max(1024, (EDGE_BLOCK * 16) // max(k, 1))
    starts = range(0, c.size, block)
    workers = max(1, min(compute_threads(), len(starts)))
    done = [0]
    lock = threading.Lock()

    def advance(count):
        if progress:
            with lock:
                done[0] += count
                progress(done[0], c.size)

    def work(share):
        _sum_blocks(u, i, j, c, edge_sum, block, share, groups, pairs_of, w, k, advance)

    # The edges' blocks are shared among threads, one per core: numpy's gathers, sorts and products
    # release the GIL, so the cores sum at once (docs/performance.md). Each block's BLAS product runs on
    # one thread: small products, whose BLAS threads would only wait for each other.
    with one_blas_thread():
        on_threads(work, [starts[t::workers] for t in range(workers)])
    return edge_sum


def _sum_blocks(u, i, j, c, edge_sum, block, starts, groups, pairs_of, w, k, advance):
    """Fill edge_sum (the weighted sum over pairs of |voltage drop| times conductance) on the blocks at ``starts``."""
    for start in starts:
        stop = min(start + block, c.size)
        # Rows gathered into fresh arrays: numpy's take into a given ``out`` took twice as long (0.93 s against
        # 0.43 s for the 4 million edges of the 1000 x 1000 benchmark, one thread, same run).
        drop = u.take(i[start:stop], axis=0)
        drop -= u.take(j[start:stop], axis=0)                                       # (block, k)
        total = np.zeros(stop - start)
        if groups is not None:
            for members, weight in groups:
                whole = members.size == k       # then the only group, and drop may be sorted in place
                total += _sorted_pair_sum(drop if whole else drop[:, members], weight, in_place=whole)
        else:
            for a, others in pairs_of:
                if others.size:
                    total += np.abs(drop[:, others] - drop[:, a:a + 1]) @ w[a, others]
        edge_sum[start:stop] = c[start:stop] * total
        advance(stop - start)


def _product_groups(component_of_patch, w):
    """[(members, patch weights)] per component when w_ab = s_a s_b inside components and 0 across; else None."""
    k = w.shape[0]
    if w.shape != (k, k) or not np.array_equal(w, w.T):
        return None
    same = component_of_patch[:, None] == component_of_patch[None, :]
    off = ~np.eye(k, dtype=bool)
    if np.any(w[~same & off] != 0):
        return None
    groups = []
    for comp in np.unique(component_of_patch):
        members = np.flatnonzero(component_of_patch == comp)
        m = members.size
        if m < 2:
            continue
        sub = w[np.ix_(members, members)]
        if m == 2:
            if sub[0, 1] < 0:
                return None
            s = np.full(2, np.sqrt(sub[0, 1]))
        else:
            if np.any(sub[~np.eye(m, dtype=bool)] <= 0):
                return None
            a = np.arange(m)
            b, cc = (a + 1) % m, (a + 2) % m
            s = np.sqrt(sub[a, b] * sub[a, cc] / sub[b, cc])
            offm = ~np.eye(m, dtype=bool)
            if not np.allclose(np.outer(s, s)[offm], sub[offm], rtol=1e-12, atol=0.0):
                return None
        groups.append((members, s))
    return groups


def _sorted_pair_sum(drop, weight, in_place=False):
    """sum over column pairs a < b of s_a s_b |drop_a - drop_b|, per row, by sorting each row.

    ``in_place``: with equal weights, sort ``drop`` itself rather than a copy.
    """
    m = drop.shape[1]
    if np.all(weight == weight[0]):
        coef = (2.0 * np.arange(m) - (m - 1)) * weight[0] ** 2
        if in_place:
            drop.sort(axis=1)
            return drop @ coef
        return np.sort(drop, axis=1) @ coef
    order = np.argsort(drop, axis=1)
    d = np.take_along_axis(drop, order, axis=1)
    s = weight[order]
    below = np.cumsum(s, axis=1)
    below -= s                                   # weight strictly before position i
    above = weight.sum() - below - s           # weight strictly after position i
    below -= above
    d *= s
    d *= below
    return d.sum(axis=1)
