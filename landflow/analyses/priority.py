"""Corridor prioritisation: link ranking, corridor maps, pinch points, restoration gain, scenarios.

Everything here reuses the k - 1 solves of :func:`landflow.analyses.resistance.patch_voltages`;
only a scenario (a changed landscape) needs solves of its own.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError
from ..graph import cell_edges
from .current import current_density, pair_current, pair_weights
from .resistance import _symmetric_submatrix, effective_resistance, rhs_blocks

__all__ = [
    "pair_nodes", "check_connected_pairs", "objective_weights", "connectivity", "link_conductance", "corridor_ranking",
    "Corridor", "corridor", "corridor_cells_table", "restoration_gain", "edge_restoration_gain", "edge_loss", "scenario_change",
]

#: 1 - c R_ab below this counts as a bridge: losing the link splits the patches.
_BRIDGE = 1e-9


def pair_nodes(graph, pairs):
    """Patch labels ``[(id_a, id_b), ...]`` -> node indices ``[(a, b), ...]``.

    Raises
    ------
    InputError
        A label that is no patch of the graph, or a pair of one patch with itself.
    """
    known = {int(p): n for n, p in enumerate(graph.patch_ids)}
    out = []
    for pair in pairs:
        ids = [int(p) for p in pair]
        if len(ids) != 2 or ids[0] == ids[1]:
            raise InputError(f"pair {list(pair)} must name two different patches.")
        for p in ids:
            if p not in known:
                raise InputError(f"pair {ids}: there is no patch {p}; the patches are "
                                 f"{', '.join(map(str, known))}.")
        out.append((known[ids[0]], known[ids[1]]))
    return out


def check_connected_pairs(graph, pairs):
    """Raise InputError for the first node pair whose patches lie in separate pieces of the landscape.

    Needs only the graph's components, so a study can check its pairs before any solve.
    """
    comp, ids = graph.components, graph.patch_ids
    for a, b in pairs:
        if comp[a] != comp[b]:
            raise InputError(f"patches {ids[a]} and {ids[b]} lie in separate pieces of the landscape; their "
                             "effective resistance is infinite and has no derivative. Choose a connected pair.")


def objective_weights(voltages, pairs=None, patch_weight=None):
    """Symmetric k x k weights of an objective sum over pairs.

    With ``pairs`` (node index pairs) each listed pair weighs 1; otherwise every
    connected pair weighs w_a w_b (1 without patch weights), as in
    :func:`landflow.analyses.current.pair_weights`.

    Raises
    ------
    InputError
        A listed pair lies in two pieces of the landscape (infinite resistance).
    """
    if pairs is None:
        return pair_weights(voltages, patch_weight)
    check_connected_pairs(voltages.graph, pairs)
    k = voltages.graph.n_patches
    w = np.zeros((k, k))
    for a, b in pairs:
        w[a, b] = w[b, a] = 1.0
    return w


def connectivity(resistance, weights):
    """Overall connectivity sum over pairs a < b of w_ab / R_ab (0 for R = inf).

    It is the weighted sum of the pairs' effective conductances: the current
    that would flow between a and b under a unit voltage. Units: weight units
    per (resistance unit x map unit).
    """
    a, b = np.triu_indices(resistance.shape[0], 1)
    with np.errstate(divide="ignore"):
        g = np.where(np.isfinite(resistance[a, b]), 1.0 / resistance[a, b], 0.0)
    return float((weights[a, b] * g).sum())


def link_conductance(voltages):
    """Conductance of the direct link between every two patches (Kron reduction).

    Eliminating every non-patch node from the circuit leaves an equivalent
    circuit on the k patches alone (the Schur complement S of the Laplacian
    onto the patch nodes) with the same effective resistance between every two
    patches. Its edge a-b has conductance c_ab = -S_ab >= 0: the conductance
    of all routes from a to b that pass through no other patch.

    S needs no new solve: with the patches of a component grounded at p_0,
    the patch rows of the solved potentials form (S_g)^-1, the inverse of S
    with p_0's row and column removed, and S's rows sum to zero.

    References
    ----------
    Dörfler & Bullo 2013, "Kron reduction of graphs with applications to
    electrical networks", IEEE Trans. Circuits and Systems I 60:150,
    doi:10.1109/TCSI.2012.2215780.

    Returns
    -------
    ndarray, shape (k, k)
        Symmetric, zero diagonal, 0 between pieces. Units: 1 / (resistance unit x map unit).

    Notes
    -----
    Cost: one dense inverse of size (m - 1) per piece of m patches.

    Examples
    --------
    A 1 x 5 strip of unit resistance with patches 1, 2, 3 at cells 0, 2, 4:
    patch 1 reaches 3 only through 2, so there is no direct link 1-3.

    >>> import landflow as lf
    >>> g = lf.build_graph(lf.Grid.from_array([[1.0] * 5]), [[1, 0, 2, 0, 3]])
    >>> link_conductance(lf.patch_voltages(g)).round(12)
    array([[0. , 0.5, 0. ],
           [0.5, 0. , 0.5],
           [0. , 0.5, 0. ]])
    """
    k = voltages.graph.n_patches
    c = np.zeros((k, k))
    comp = voltages.component_of_patch
    for piece in np.unique(comp):
        members = np.flatnonzero(comp == piece)
        if members.size < 2:
            continue
        u = voltages.potential[np.ix_(members[1:], members[1:])]
        s_g = np.linalg.inv(0.5 * (u + u.T))
        s = np.empty((members.size, members.size))
        s[1:, 1:] = s_g
        s[0, 1:] = s[1:, 0] = -s_g.sum(axis=0)
        s[0, 0] = s_g.sum()
        block = np.maximum(-0.5 * (s + s.T), 0.0)
        np.fill_diagonal(block, 0.0)
        c[np.ix_(members, members)] = block
    return c


def corridor_ranking(voltages, weights=None, *, least_cost=None):
    """Rank the links between patches by the connectivity lost without them.

    The overall connectivity is F = sum over pairs x < y of w_xy / R_xy
    (:func:`connectivity`). The link a-b is the direct connection of the
    Kron-reduced circuit (:func:`link_conductance`); losing it removes
    conductance c = c_ab between a and b, and every effective resistance
    becomes, by the Sherman-Morrison formula on the Laplacian's pseudo-inverse,

        R'_xy = R_xy + c t_xy^2 / (1 - c R_ab),  t_xy = (R_xb + R_ya - R_xa - R_yb) / 2,

    exactly (t_xy is the voltage across the link for a unit current from x to
    y). When 1 - c R_ab = 0 the link is a bridge: pairs with t_xy != 0 are cut
    apart (R' = inf). The drop is F - F'.

    Parameters
    ----------
    voltages : PatchVoltages
    weights : ndarray (k, k), optional
        Pair weights, default 1 for every connected pair.
    least_cost : ndarray (k, k), optional
        Least-cost distances to show beside the effective resistance.

    Returns
    -------
    DataFrame
        One row per pair, sorted by ``rank`` (1 = the largest drop). Columns
        ``rank, patch_a, patch_b, effective_resistance, [least_cost_distance,]
        pair_weight, weighted_conductance, link_conductance, direct_share,
        link_current, resistance_without_link, connectivity_drop,
        connectivity_drop_share``; see docs/prioritisation.md.

    Notes
    -----
    Cost: O(m^4) arithmetic for m patches in a piece (every link against every
    pair), no solve.

    Examples
    --------
    On the strip 1 - 2 - 3 (unit cells, R_12 = R_23 = 2, R_13 = 4, so
    F = 1/2 + 1/2 + 1/4), losing link 1-2 cuts patch 1 off: the drop is
    1/R_12 + 1/R_13 = 0.75. Link 1-3 does not exist, so losing it costs nothing.

    >>> import landflow as lf
    >>> g = lf.build_graph(lf.Grid.from_array([[1.0] * 5]), [[1, 0, 2, 0, 3]])
    >>> t = corridor_ranking(lf.patch_voltages(g))
    >>> print(t[["rank", "patch_a", "patch_b", "connectivity_drop"]].round(9).to_string(index=False))
     rank  patch_a  patch_b  connectivity_drop
        1        1        2               0.75
        2        2        3               0.75
        3        1        3               0.00
    """
    graph = voltages.graph
    k = graph.n_patches
    r = effective_resistance(voltages)
    w = pair_weights(voltages) if weights is None else np.asarray(weights, dtype=float)
    c = link_conductance(voltages)
    total = connectivity(r, w)
    a_idx, b_idx = np.triu_indices(k, 1)
    n_pairs = a_idx.size
    drop = np.zeros(n_pairs)
    link_current = np.zeros(n_pairs)
    r_without = r[a_idx, b_idx].copy()
    comp = voltages.component_of_patch
    for n, (a, b) in enumerate(zip(a_idx, b_idx)):
        if comp[a] != comp[b] or c[a, b] <= 0:
            continue
        members = np.flatnonzero(comp == comp[a])
        sub = r[np.ix_(members, members)]
        ws = w[np.ix_(members, members)]
        pa, pb = np.searchsorted(members, [a, b])
        t = 0.5 * (sub[:, [pb]] + sub[[pa], :] - sub[:, [pa]] - sub[[pb], :])
        upper = np.triu(np.ones_like(sub, dtype=bool), 1)
        link_current[n] = c[a, b] * (ws * np.abs(t))[upper].sum()
        denominator = 1.0 - c[a, b] * r[a, b]
        if denominator > _BRIDGE:
            new = sub + c[a, b] * t**2 / denominator
        else:
            new = np.where(np.abs(t) > 1e-9 * r[a, b], np.inf, sub)
        with np.errstate(divide="ignore"):
            before = (ws / np.where(upper, sub, np.inf))[upper].sum()
            after = (ws / np.where(upper, new, np.inf))[upper].sum()
        drop[n] = before - after
        r_without[n] = new[pa, pb]
    r_ab = r[a_idx, b_idx]
    with np.errstate(divide="ignore", invalid="ignore"):
        weighted = np.where(np.isfinite(r_ab), w[a_idx, b_idx] / r_ab, 0.0)
        direct = np.where(np.isfinite(r_ab), c[a_idx, b_idx] * r_ab, 0.0)
    table = pd.DataFrame({"patch_a": graph.patch_ids[a_idx], "patch_b": graph.patch_ids[b_idx],
                          "effective_resistance": r_ab})
    if least_cost is not None:
        table["least_cost_distance"] = np.asarray(least_cost)[a_idx, b_idx]
    table["pair_weight"] = w[a_idx, b_idx]
    table["weighted_conductance"] = weighted
    table["link_conductance"] = c[a_idx, b_idx]
    table["direct_share"] = direct
    table["link_current"] = link_current
    table["resistance_without_link"] = r_without
    table["connectivity_drop"] = drop
    table["connectivity_drop_share"] = drop / total if total > 0 else 0.0
    # rank by the drop, then by resistance, then by pair; values equal to 12 digits count as ties, so that
    # rounding in the last bits (which differs between solvers) does not reorder equal links
    order = np.lexsort((b_idx, a_idx, _to_12_digits(r_ab), -_to_12_digits(drop)))
    table = table.iloc[order].reset_index(drop=True)
    table.insert(0, "rank", np.arange(1, n_pairs + 1))
    return table


@dataclass(eq=False)
class Corridor:
    """The corridor of one patch pair on the grid.

    Attributes
    ----------
    a, b : int
        Patch nodes.
    current : ndarray (rows, cols)
        Current through each non-patch cell for a unit current from a to b
        (A per A injected); NaN on patch cells and outside the landscape.
    share_of_peak : ndarray (rows, cols)
        ``current`` divided by its largest cell value, in [0, 1].
    inside : ndarray of bool (rows, cols)
        The corridor: the fewest cells that carry ``share`` of the summed current.
    pinch : ndarray of bool (rows, cols)
        Corridor cells through which at least ``pinch_share`` of the unit current passes.
    share, pinch_share : float
    """

    a: int
    b: int
    current: np.ndarray
    share_of_peak: np.ndarray
    inside: np.ndarray
    pinch: np.ndarray
    share: float
    pinch_share: float


def corridor(voltages, a, b, *, share=0.5, pinch_share=0.05):
    """Corridor extent and pinch points of the unit current from patch a to patch b.

    Rules (cells of any patch are left out: they are the ends or stepping stones):

    * share of peak current: the cell's current divided by the largest cell current.
    * corridor: sort cells by current, largest first (ties by cell order); the
      corridor is the shortest run from the top whose summed current reaches
      ``share`` of the summed current of all cells.
    * pinch point: a corridor cell through which at least ``pinch_share`` of
      the pair's unit current passes. Every cut of the landscape that separates
      a from b carries the whole unit current (Kirchhoff's current law), so a
      cell carrying a large share of it is a narrow passage all movement
      between the two patches must squeeze through.

    Parameters
    ----------
    voltages : PatchVoltages
    a, b : int
        Patch nodes (connected).
    share : float in (0, 1]
    pinch_share : float in (0, 1]

    Returns
    -------
    Corridor
    """
    for name, value in (("share", share), ("pinch_share", pinch_share)):
        if not 0.0 < value <= 1.0:
            raise InputError(f"{name} must be in (0, 1]; got {value!r}.")
    graph = voltages.graph
    k = graph.n_patches
    flow = pair_current(voltages, a, b)
    flow[:k] = np.nan
    cells = graph.to_raster(flow, dtype=np.float64)
    values = np.nan_to_num(cells, nan=0.0).reshape(-1)
    peak = values.max()
    share_of_peak = cells / peak if peak > 0 else np.zeros_like(cells)
    order = np.argsort(-values, kind="stable")
    running = np.cumsum(values[order])
    total = running[-1] if running.size else 0.0
    inside = np.zeros(values.size, dtype=bool)
    if total > 0:
        stop = int(np.searchsorted(running, share * total * (1 - 1e-12))) + 1
        inside[order[:stop]] = True
    inside = inside.reshape(cells.shape)
    pinch = inside & (np.nan_to_num(cells, nan=0.0) >= pinch_share)
    return Corridor(a, b, cells, share_of_peak, inside, pinch, share, pinch_share)


def corridor_cells_table(found, grid, patch_ids, *, top=10):
    """The ``top`` corridor cells by current, with map coordinates of their centres.

    Columns: ``patch_a, patch_b, row, col, x, y, current, share_of_peak_current, pinch_point``.
    """
    rows, cols = np.nonzero(found.inside)
    current = found.current[rows, cols]
    order = np.argsort(-current, kind="stable")[:top]
    rows, cols = rows[order], cols[order]
    x, y = grid.xy(rows, cols)
    return pd.DataFrame({
        "patch_a": patch_ids[found.a], "patch_b": patch_ids[found.b], "row": rows, "col": cols,
        "x": x, "y": y, "current": found.current[rows, cols],
        "share_of_peak_current": found.share_of_peak[rows, cols], "pinch_point": found.pinch[rows, cols],
    })


def restoration_gain(voltages, grid, weights, *, kind="resistance"):
    """First-order drop of a weighted sum of effective resistances per unit change of each cell.

    The objective is F = sum over pairs a < b of w_ab R_ab. For an edge e = xy
    and a unit current from a to b, dR_ab / dC_e = -(v_x - v_y)^2 (Ghosh, Boyd
    & Saberi 2008, "Minimizing effective resistance of a graph", SIAM Review
    50:37, doi:10.1137/050645452), so dF / dC_e = -s_e with
    s_e = sum_ab w_ab (v_x - v_y)^2 = D_e^T (diag(W 1) - W) D_e, D_e the
    voltage drops across e of all k solved potentials. A cell's value enters
    only its own edges, so the chain rule over the cell-level edges (before
    patch merging; edges inside a patch carry no voltage drop) gives

    * resistance surface, gain = dF / dr_c = sum_e s_e (-dC_e / dr_c) with
      -dC_e/dr_c = C_e^2 d_e / 2 (``mean_resistance``) or 1 / (2 d_e r_c^2)
      (``mean_conductance``): the first-order drop of F per unit *reduction*
      of the cell's resistance. Units: (F's unit) per (resistance unit), i.e.
      map units times the weights' unit.
    * conductance surface, gain = -dF / dg_c = sum_e s_e dC_e / dg_c with
      dC_e/dg_c = C_e^2 d_e / (2 g_c^2) (``mean_resistance``) or 1 / (2 d_e)
      (``mean_conductance``): the drop of F per unit *increase* of the cell's
      conductance.

    Positive means the objective falls (connectivity improves). By Rayleigh's
    monotonicity law the gain is never negative.

    Parameters
    ----------
    voltages : PatchVoltages
        The solves of the graph built from ``grid``.
    grid : Grid
        The surface the graph was built from.
    weights : ndarray (k, k)
        Symmetric pair weights (:func:`objective_weights`).
    kind : {"resistance", "conductance"}

    Returns
    -------
    ndarray (rows, cols)
        Gain per cell; NaN outside the landscape (and on barrier cells of a
        conductance surface, which are not part of the circuit).

    Notes
    -----
    Cost: O(E k^2) arithmetic for E cell edges and k patches; no solve.

    Examples
    --------
    A 1 x 3 strip, patches at the ends: R = (r_0 + r_1)/2 + (r_1 + r_2)/2, so
    dR/dr = (1/2, 1, 1/2) whatever the values.

    >>> import landflow as lf
    >>> grid = lf.Grid.from_array([[2.0, 5.0, 3.0]])
    >>> v = lf.patch_voltages(lf.build_graph(grid, [[1, 0, 2]]))
    >>> restoration_gain(v, grid, lf.pair_weights(v)).round(12)
    array([[0.5, 1. , 0.5]])
    """
    graph = voltages.graph
    edges = cell_edges(grid, kind=kind, neighbours=graph.neighbours, edge_rule=graph.edge_rule,
                       values_per=graph.values_per)
    w = np.asarray(weights, dtype=float)
    lap_w = np.diag(w.sum(axis=1)) - w
    node = graph.node_of_cell.reshape(-1)
    ni, nj = node[edges.cell_i], node[edges.cell_j]
    u = voltages.potential
    s = np.empty(ni.size)
    block = 262_144
    for start in range(0, ni.size, block):
        stop = min(start + block, ni.size)
        drop = u[ni[start:stop]] - u[nj[start:stop]]
        s[start:stop] = np.einsum("ea,ab,eb->e", drop, lap_w, drop)
    s = np.maximum(s, 0.0)
    flat = grid.values.reshape(-1)
    d, cond = edges.rule_length, edges.conductance
    if graph.edge_rule == "mean_resistance":
        if kind == "resistance":
            di = dj = cond**2 * d / 2.0
        else:
            base = cond**2 * d / 2.0
            di, dj = base / flat[edges.cell_i] ** 2, base / flat[edges.cell_j] ** 2
    else:
        if kind == "resistance":
            di = 1.0 / (2.0 * d * flat[edges.cell_i] ** 2)
            dj = 1.0 / (2.0 * d * flat[edges.cell_j] ** 2)
        else:
            di = dj = 1.0 / (2.0 * d)
    n_cells = flat.size
    gain = (np.bincount(edges.cell_i, s * di, minlength=n_cells)
            + np.bincount(edges.cell_j, s * dj, minlength=n_cells)).reshape(grid.shape)
    gain[graph.node_of_cell < 0] = np.nan
    return gain


def edge_restoration_gain(voltages, weights, edges):
    """First-order drop of a weighted sum of effective resistances per unit reduction of each edge's resistance.

    With F = sum_{a<b} w_ab R_ab and dR_ab / dC_e = -(v_x - v_y)^2 for a unit
    current from a to b (Ghosh, Boyd & Saberi 2008, "Minimizing effective
    resistance of a graph", SIAM Review 50:37, doi:10.1137/050645452), an
    edge of resistance r_e = 1 / C_e has gain = -dF / dr_e = C_e^2 s_e with
    s_e = sum_ab w_ab (v_x - v_y)^2: the network counterpart of
    :func:`restoration_gain`, for edges instead of cells. Never negative
    (Rayleigh's monotonicity law).

    Parameters
    ----------
    voltages : PatchVoltages
    weights : ndarray (k, k)
        Symmetric pair weights (:func:`objective_weights`).
    edges : (i, j, c)
        End nodes (of ``voltages.graph``) and conductance of each edge; an
        edge inside a patch gets 0.

    Returns
    -------
    ndarray, one value per edge: F's unit per resistance unit.

    Examples
    --------
    Two edges in series between two zones: R = r_1 + r_2, so dR/dr_e = 1 each.

    >>> import landflow as lf
    >>> g = lf.network_graph([0, 1], [1, 2], [0.5, 0.25], zones=[1, 0, 2])
    >>> v = lf.patch_voltages(g)
    >>> edge_restoration_gain(v, lf.pair_weights(v), ([0, 2], [2, 1], [0.5, 0.25])).round(12)
    array([1., 1.])
    """
    i, j, c = (np.asarray(a) for a in edges)
    w = np.asarray(weights, dtype=float)
    lap_w = np.diag(w.sum(axis=1)) - w
    drop = voltages.potential[i] - voltages.potential[j]
    s = np.maximum(np.einsum("ea,ab,eb->e", drop, lap_w, drop), 0.0)
    return np.asarray(c, dtype=float) ** 2 * s


def edge_loss(voltages, weights, edges, *, method="auto", tolerance=1e-8):
    """Overall connectivity without each edge, exactly, from one extra solve per edge.

    Removing edge e = xy of conductance c from the Laplacian L is a rank-one
    change, L' = L - c b b^T with b = e_x - e_y, so by the Sherman-Morrison
    formula (Sherman & Morrison 1950, "Adjustment of an inverse matrix
    corresponding to a change in one element of a given matrix", Ann. Math.
    Statist. 21:124, doi:10.1214/aoms/1177729893), for every pair a, b

        R'_ab = R_ab + c (v_x - v_y)^2 / (1 - c R_xy),

    where v_x - v_y is the voltage drop across e for a unit current from a to b
    (from the solves already done) and R_xy the effective resistance between
    the edge's ends (one solve per edge). When c R_xy = 1 the edge is a bridge:
    pairs whose current crosses it are cut apart (R' = inf).

    Parameters
    ----------
    voltages : PatchVoltages
    weights : ndarray (k, k)
        Symmetric pair weights (:func:`landflow.pair_weights`).
    edges : (i, j, c)
        End nodes (of ``voltages.graph``) and conductance of each edge; an
        edge inside a patch changes nothing.
    method, tolerance : passed to :func:`landflow.solve.factorize`.

    Returns
    -------
    table : DataFrame, one row per edge
        ``end_resistance`` (R_xy), ``bridge``, ``connectivity_after`` (sum over
        pairs of w_ab / R'_ab), ``connectivity_drop`` (before minus after) and
        ``connectivity_drop_share`` (drop / before).
    solvers : list of Solver (for the manifest)

    Notes
    -----
    Cost: one factorisation per connected component, one solve per edge and
    O(m k^2) arithmetic for m edges and k patches.
    """
    from ..solve import factorize
    graph = voltages.graph
    i, j, c = (np.asarray(a) for a in edges)
    c = np.asarray(c, dtype=float)
    m = i.size
    end_resistance = np.zeros(m)
    comp = graph.components
    laplacian = graph.laplacian()
    solvers = []
    active = i != j
    for piece in np.unique(comp[i[active]]):
        these = np.flatnonzero(active & (comp[i] == piece))
        nodes = np.flatnonzero(comp == piece)
        ground, keep = nodes[0], nodes[1:]
        if keep.size == 0:
            continue
        position = np.full(graph.n_nodes, -1)
        position[keep] = np.arange(keep.size)
        solver = factorize(_symmetric_submatrix(laplacian, keep), method=method, tolerance=tolerance,
                           n_rhs=these.size)
        for first, stop in rhs_blocks(these.size, keep.size):
            block = these[first:stop]
            rhs = np.zeros((keep.size, block.size))
            cols = np.arange(block.size)
            on_x, on_y = position[i[block]] >= 0, position[j[block]] >= 0
            rhs[position[i[block]][on_x], cols[on_x]] += 1.0
            rhs[position[j[block]][on_y], cols[on_y]] -= 1.0
            u = solver.solve(rhs)
            ux = np.where(on_x, u[np.maximum(position[i[block]], 0), cols], 0.0)
            uy = np.where(on_y, u[np.maximum(position[j[block]], 0), cols], 0.0)
            end_resistance[block] = ux - uy
        solver.release()
        solvers.append(solver)
    r = effective_resistance(voltages)
    w = np.asarray(weights, dtype=float)
    k = graph.n_patches
    a, b = np.triu_indices(k, 1)
    pair_w = w[a, b]
    before = connectivity(r, w)
    potential = voltages.potential
    slack = 1.0 - c * end_resistance
    bridge = active & (slack <= 1e-9)
    after = np.full(m, before)
    for start in range(0, m, 4096):
        e = np.arange(start, min(start + 4096, m))
        drop = potential[i[e]] - potential[j[e]]                # (edges, k)
        pair_drop = drop[:, a] - drop[:, b]                     # (edges, pairs)
        with np.errstate(divide="ignore", invalid="ignore"):
            extra = (c[e, None] * pair_drop**2) / slack[e, None]
            cut = bridge[e, None] & (np.abs(c[e, None] * pair_drop) > 0.5)
            new_r = np.where(cut, np.inf, r[a, b][None, :] + np.where(bridge[e, None], 0.0, extra))
            terms = np.where(pair_w[None, :] > 0, pair_w[None, :] / new_r, 0.0)
        after[e] = np.where(active[e], terms.sum(axis=1), before)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(before > 0, (before - after) / before, 0.0)
    table = pd.DataFrame({"end_resistance": np.where(active, end_resistance, 0.0), "bridge": bridge,
                          "connectivity_after": after, "connectivity_drop": before - after,
                          "connectivity_drop_share": share})
    return table, solvers


def scenario_change(before, after, weights_before, weights_after):
    """Change of every pair's effective resistance and of current density between two landscapes.

    Parameters
    ----------
    before, after : PatchVoltages
        Solves on the present and the changed landscape (same grid, same patches).
    weights_before, weights_after : ndarray (k, k)
        Pair weights for current density on each (they differ only where
        the change splits or joins pieces of the landscape).

    Returns
    -------
    table : DataFrame
        ``patch_a, patch_b, resistance_before, resistance_after, resistance_change,
        resistance_change_percent`` (change = after - before).
    current_change : ndarray (rows, cols)
        Current density after minus before on every cell; a cell outside the
        landscape on one side counts as carrying 0 there; NaN where it is
        outside on both.
    totals : dict
        Overall connectivity (:func:`connectivity`) before and after.

    Raises
    ------
    InputError
        The two graphs do not have the same patches.
    """
    g0, g1 = before.graph, after.graph
    if g0.shape != g1.shape:
        raise InputError(f"the changed landscape has {g1.shape[0]} x {g1.shape[1]} cells but the present one "
                         f"{g0.shape[0]} x {g0.shape[1]}; both must lie on the same grid. Resample the changed "
                         "raster onto the present one's grid.")
    if not np.array_equal(g0.patch_ids, g1.patch_ids):
        lost = np.setdiff1d(g0.patch_ids, g1.patch_ids)
        gained = np.setdiff1d(g1.patch_ids, g0.patch_ids)
        which = (f"patch(es) {', '.join(map(str, lost))} are lost" if lost.size
                 else f"patch(es) {', '.join(map(str, gained))} are new")
        raise InputError(f"the changed landscape must keep every patch on the same grid; {which}. "
                         "Keep the same patches, with their cells inside the changed landscape.")
    r0, r1 = effective_resistance(before), effective_resistance(after)
    k = g0.n_patches
    a, b = np.triu_indices(k, 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        change = r1[a, b] - r0[a, b]
        percent = 100.0 * change / r0[a, b]
    table = pd.DataFrame({"patch_a": g0.patch_ids[a], "patch_b": g0.patch_ids[b],
                          "resistance_before": r0[a, b], "resistance_after": r1[a, b],
                          "resistance_change": change, "resistance_change_percent": percent})
    c0 = g0.to_raster(current_density(before, weights_before), dtype=np.float64)
    c1 = g1.to_raster(current_density(after, weights_after), dtype=np.float64)
    outside = np.isnan(c0) & np.isnan(c1)
    current_change = np.where(outside, np.nan, np.nan_to_num(c1) - np.nan_to_num(c0))
    totals = {"connectivity_before": connectivity(r0, weights_before),
              "connectivity_after": connectivity(r1, weights_after)}
    return table, current_change, totals


def _to_12_digits(values):
    """``values`` rounded to 12 significant digits (inf and NaN kept), for ranking with ties."""
    values = np.asarray(values, dtype=np.float64)
    out = values.copy()
    finite = np.isfinite(values) & (values != 0)
    exponent = np.floor(np.log10(np.abs(values[finite])))
    out[finite] = np.round(values[finite] / 10.0 ** (exponent - 11)) * 10.0 ** (exponent - 11)
    return out
