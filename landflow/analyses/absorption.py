"""Absorbing random walks: where a walker ends up, how likely it dies on the way, how long it takes.

The walk hops from node x to a neighbour y with probability P_xy = c_xy / C_x,
where C_x = sum_y c_xy is the total conductance at x (Doyle & Snell 1984).
Patches are merged nodes (nodes 0..k-1 of the :class:`~landflow.graph.CellGraph`);
a chosen set of them is *absorbing*: the walk stops on entering one. Every other
node is *transient*. With mortality, a walker on transient cell x dies with
probability kappa_x before each hop.

Killing is handled as an extra conductance from x to an outside ground,

    g_x = C_x kappa_x / (1 - kappa_x),

because then the hop probabilities c_xy / (C_x + g_x) = (1 - kappa_x) P_xy and
g_x / (C_x + g_x) = kappa_x are exactly the walk with death probability kappa_x.
With G = (L + diag(g)) restricted to the transient nodes (L the Laplacian) and
D = diag(C + g), the fundamental matrix of the absorbing chain is

    N = (I - Q)^-1 = G^-1 D                       (Kemeny & Snell 1960, ch. III)

so every quantity below is one sparse SPD solve with G, factorised once and
reused for every right-hand side; N is never formed.

* absorption into patch a:  B[:, a] = G^-1 c_{., a}     (column a of N R)
* death:                    B_death = G^-1 g
* expected steps:           t = N 1 = G^-1 (C + g)
* expected time:            N tau = G^-1 ((C + g) tau)
* expected visits:          mu N, i.e. visits = (C + g) * G^-1 mu   (G symmetric)

References
----------
Kemeny, J. G. & Snell, J. L. (1960). Finite Markov Chains. Van Nostrand, ch. III.
Grinstead, C. M. & Snell, J. L. (1997). Introduction to Probability. AMS, section 11.2.
Doyle, P. G. & Snell, J. L. (1984). Random Walks and Electric Networks. MAA.
    arXiv:math/0001057.
Lyons, R. & Peres, Y. (2016). Probability on Trees and Networks. Cambridge
    University Press, ch. 2. doi:10.1017/9781316672815
"""

from __future__ import annotations

import warnings
from functools import cached_property

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from ..errors import InputError
from ..solve import factorize

__all__ = [
    "AbsorbingWalk", "absorbing_walk", "StrandedWalkWarning",
    "check_mortality", "mortality_from_resistance", "node_mortality", "killing_conductance",
    "hitting_probability", "absorption_probability", "most_likely_destination", "arrival_table",
    "expected_steps", "release_expected_steps", "expected_visits", "release_distribution",
    "node_crossing_time", "node_source",
]


class StrandedWalkWarning(UserWarning):
    """Some cells cannot reach a patch: their probabilities are 0 (and the message counts them)."""


# -- inputs on the grid ----------------------------------------------------------------------


def _where(row, col, where):
    return where(row, col) if where is not None else f"row {row}, col {col}"


def _on_grid(values, graph, what, source):
    values = np.asarray(values, dtype=np.float64)
    if values.shape != tuple(graph.shape):
        raise InputError(f"{source}: the {what} has shape {values.shape} but the landscape has {tuple(graph.shape)}; "
                         "it must lie on the landscape's grid. Resample it onto that grid.")
    return values


def _require_nonnegative(values, cells, what, source, where, fix):
    """Raise InputError naming the first of ``cells`` whose value is negative or not finite."""
    bad = cells & ~(np.isfinite(values) & (values >= 0))
    if bad.any():
        rows, cols = np.nonzero(bad)
        raise InputError(f"{source}: {int(bad.sum())} landscape cell(s) have {what} that is negative or "
                         f"missing (first: {float(values[rows[0], cols[0]]):g} at {_where(rows[0], cols[0], where)}). "
                         + fix)


def check_mortality(mortality, graph, *, source="mortality", where=None):
    """Check a per-cell death probability raster and return it as float64.

    Parameters
    ----------
    mortality : array_like, shape of the grid
        Per-step death probability kappa in [0, 1) on every landscape cell.
        Cells outside the landscape are ignored (use 0 where there is no
        mortality).
    graph : CellGraph
    source : str
        The file or key the values came from, for messages.
    where : callable(row, col) -> str, optional
        Locates a cell in messages (``Grid.where``).

    Raises
    ------
    InputError
        Wrong shape, or a landscape cell with a value outside [0, 1) or NaN.
    """
    values = _on_grid(mortality, graph, "mortality raster", source)
    inside = graph.node_of_cell >= 0
    bad = inside & ~((values >= 0) & (values < 1))
    if bad.any():
        rows, cols = np.nonzero(bad)
        raise InputError(f"{source}: {int(bad.sum())} landscape cell(s) have a per-step death probability outside "
                         f"[0, 1) (first: {float(values[rows[0], cols[0]]):g} at {_where(rows[0], cols[0], where)}). "
                         "Mortality is a probability per step: use 0 for none and values below 1 "
                         "(1 would kill every walker on the spot; make such cells barriers instead).")
    return values


def mortality_from_resistance(resistance, death_per_resistance):
    """Per-step death probability from resistance: kappa = 1 - exp(-lambda * r).

    A walker crossing a cell of resistance r (per unit length) survives with
    probability exp(-lambda r): the hazard grows with the resistance, which many
    resistance surfaces already encode (roads, built land). Always in [0, 1).

    Parameters
    ----------
    resistance : ndarray
        Resistance per unit length (NaN allowed outside the landscape).
    death_per_resistance : float
        lambda >= 0, hazard per unit of resistance (1 / resistance unit).

    Examples
    --------
    >>> mortality_from_resistance(np.array([0.0, 1.0]), np.log(2))
    array([0. , 0.5])
    """
    if not death_per_resistance >= 0:
        raise InputError(f"death_per_resistance must be >= 0; got {death_per_resistance!r}.")
    r = np.nan_to_num(np.asarray(resistance, dtype=np.float64), nan=0.0, posinf=0.0)
    return -np.expm1(-death_per_resistance * r)


def node_mortality(graph, mortality):
    """Per-node death probability: each non-patch node takes its cell's value; patch nodes 0.

    Patches are habitat where the walk starts or ends; mortality on their
    cells is ignored.
    """
    kappa = np.zeros(graph.n_nodes)
    if mortality is None:
        return kappa
    mortality = np.asarray(mortality, dtype=np.float64)
    cells = graph.node_of_cell >= graph.n_patches
    kappa[graph.node_of_cell[cells]] = mortality[cells]
    return kappa


def killing_conductance(graph, kappa):
    """Conductance to an outside ground equivalent to per-node death probability kappa.

    g_x = C_x kappa_x / (1 - kappa_x): then g_x / (C_x + g_x) = kappa_x and
    c_xy / (C_x + g_x) = (1 - kappa_x) c_xy / C_x. Units: those of the conductance.
    """
    kappa = np.asarray(kappa, dtype=np.float64)
    return graph.total_conductance * kappa / (1.0 - kappa)


def node_crossing_time(graph, crossing_time, *, source="crossing time", where=None):
    """Per-node crossing time from a per-cell raster (time per visit; patch nodes 0).

    Raises
    ------
    InputError
        Wrong shape, or a non-patch landscape cell that is negative, NaN or infinite.
    """
    values = _on_grid(crossing_time, graph, "crossing-time raster", source)
    cells = graph.node_of_cell >= graph.n_patches
    _require_nonnegative(values, cells, "a crossing time", source, where,
                         "Crossing times are durations: give every landscape cell a value >= 0.")
    tau = np.zeros(graph.n_nodes)
    tau[graph.node_of_cell[cells]] = values[cells]
    return tau


def node_source(graph, release_weight, *, source="release weight", where=None):
    """Per-node release weight from a per-cell raster: cell values, summed over each patch's cells.

    Raises
    ------
    InputError
        Wrong shape, a landscape cell negative or not finite, or nothing released.
    """
    values = _on_grid(release_weight, graph, "release-weight raster", source)
    inside = graph.node_of_cell >= 0
    _require_nonnegative(values, inside, "a release weight", source, where,
                         "Give every landscape cell a value >= 0 (0 = no walkers released there).")
    s = np.bincount(graph.node_of_cell[inside], weights=values[inside], minlength=graph.n_nodes)
    if not s.sum() > 0:
        raise InputError(f"{source}: the release weight is 0 on every landscape cell, so no walker is released. "
                         "Give some cells a positive value.")
    return s


# -- the absorbing system --------------------------------------------------------------------


class AbsorbingWalk:
    """The walk on a CellGraph with a set of absorbing patches and optional mortality, factorised once.

    Build it with :func:`absorbing_walk`.

    Attributes
    ----------
    graph : CellGraph
    absorbing : ndarray of int
        Absorbing patch nodes (indices 0..k-1), sorted.
    kappa : ndarray, shape (n_nodes,)
        Per-step death probability of each node (0 on patches).
    killing : ndarray, shape (n_nodes,)
        g = C kappa / (1 - kappa), the conductance to the outside ground.
    transient : ndarray of int
        Nodes in the linear system: not absorbing, in a piece of the landscape
        holding an absorbing patch or a cell with mortality.
    stranded : ndarray of bool, shape (n_nodes,)
        Nodes whose walk never ends (no absorbing patch and no mortality in
        their piece of the landscape, or no neighbour at all).
    solver : Solver or None
    related : dict
        Walks on the same graph with other absorbing sets (keyed by their
        absorbing nodes), built on demand by :func:`hitting_probability` and
        kept so that their factorisations are reused.
    """

    def __init__(self, graph, absorbing, kappa, *, method="auto", tolerance=1e-8):
        self.graph = graph
        self.method, self.tolerance = method, tolerance
        self.absorbing = np.unique(np.asarray(absorbing, dtype=np.int64))
        self.kappa = np.asarray(kappa, dtype=np.float64)
        self.killing = killing_conductance(graph, self.kappa)
        n = graph.n_nodes
        self.is_absorbing = np.zeros(n, dtype=bool)
        self.is_absorbing[self.absorbing] = True
        comp = graph.components
        grounded_piece = np.zeros(comp.max() + 1 if n else 0, dtype=bool)
        grounded_piece[comp[self.is_absorbing]] = True
        grounded_piece[comp[self.killing > 0]] = True
        grounded = grounded_piece[comp]
        self.transient = np.flatnonzero(grounded & ~self.is_absorbing)
        self.stranded = ~grounded & ~self.is_absorbing
        self.related = {}

    @cached_property
    def solver(self):
        """The factorised system on the transient nodes (None without any), made on first use only."""
        if not self.transient.size:
            return None
        t = self.transient
        system = self.graph.laplacian(extra_diagonal=self.killing)[t][:, t]
        return factorize(system, method=self.method, tolerance=self.tolerance, n_rhs=self.absorbing.size + 2)

    @property
    def factorised(self):
        """True once :attr:`solver` has been made (a walk whose system was never needed costs nothing)."""
        return "solver" in self.__dict__

    def __repr__(self):
        return (f"AbsorbingWalk(absorbing patches={self.graph.patch_ids[self.absorbing].tolist()}, "
                f"transient={self.transient.size}, stranded={int(self.stranded.sum())}, "
                f"mortality={'yes' if self.kappa.any() else 'no'})")

    @property
    def departure_conductance(self):
        """C + g: the conductance leaving each node, ground included (the diagonal of D)."""
        return self.graph.total_conductance + self.killing

    def stranded_cells(self):
        """Number of grid cells on stranded nodes."""
        return _cells_of(self.graph, self.stranded)

    def solve(self, rhs):
        """Solve G x = rhs on the transient nodes; ``rhs`` and the result are per node (n_nodes,) or (n_nodes, m).

        Entries of the result off the transient nodes are 0.
        """
        rhs = np.asarray(rhs, dtype=np.float64)
        out = np.zeros(rhs.shape)
        if self.solver is None:
            return out
        part = rhs[self.transient]
        if part.ndim == 1:
            if np.any(part):
                out[self.transient] = self.solver.solve(part)
            return out
        columns = np.flatnonzero(np.any(part != 0, axis=0))      # all-zero columns have the zero solution
        if columns.size:
            out[np.ix_(self.transient, columns)] = self.solver.solve(part[:, columns])
        return out

    def patch_index(self, patch_id, key="patch"):
        """Node index of a patch id, or an InputError listing the known ids."""
        return _patch_index(self.graph, patch_id, key)

    @cached_property
    def _absorption(self):
        """(n_nodes, m + 1): columns for each absorbing patch, then death."""
        graph = self.graph
        m = self.absorbing.size
        rhs = np.zeros((graph.n_nodes, m + 1))
        rhs[:, :m] = graph.conductance[:, self.absorbing].toarray()
        rhs[:, m] = self.killing
        out = self.solve(rhs)
        out[self.absorbing, np.arange(m)] = 1.0
        return out

    def _release(self, a):
        """Outcome probabilities of one excursion from patch node a (a absorbing here).

        Returns (p over absorbing patches, death), each the probability that a
        walker hopping out of a once is next absorbed at that patch (a
        included: a return) or dies first.
        """
        row = self.graph.conductance[[a], :].toarray().ravel()
        total = row.sum()
        if total == 0:
            return np.zeros(self.absorbing.size), 0.0
        full = self._absorption
        per = row @ full / total
        return per[:-1], float(per[-1])


def absorbing_walk(graph, mortality=None, *, absorbing=None, method="auto", tolerance=1e-8,
                   source="mortality", where=None):
    """Prepare the absorbing walk on ``graph``: checks, killing conductance and one factorisation.

    Parameters
    ----------
    graph : CellGraph
    mortality : array_like, shape of the grid, optional
        Per-step death probability in [0, 1) per cell; None for none.
    absorbing : sequence of int, optional
        Patch ids that absorb the walk; default every patch.
    method, tolerance : passed to :func:`landflow.solve.factorize`.
    source, where : for messages (the mortality file; ``Grid.where``).

    Returns
    -------
    AbsorbingWalk

    Warns
    -----
    StrandedWalkWarning
        When some cells lie in pieces of the landscape with no absorbing patch
        and no mortality: their walk never ends.

    Notes
    -----
    Cost: one sparse factorisation of an SPD matrix the size of the transient
    nodes (about that of :func:`landflow.patch_voltages`), then one solve per
    right-hand side.
    """
    if graph.n_patches == 0:
        raise InputError("the landscape has no patches, so no walk can be absorbed. Add patch labels (> 0).")
    kappa = np.zeros(graph.n_nodes)
    if mortality is not None:
        kappa = node_mortality(graph, check_mortality(mortality, graph, source=source, where=where))
    if absorbing is None:
        nodes = np.arange(graph.n_patches)
    else:
        nodes = [_patch_index(graph, p, "absorbing patches") for p in absorbing]
    walk = AbsorbingWalk(graph, nodes, kappa, method=method, tolerance=tolerance)
    stranded = walk.stranded_cells()
    if stranded:
        warnings.warn(f"{stranded} cell(s) lie in pieces of the landscape with no absorbing patch and no mortality: "
                      "a walker there never arrives anywhere. Their arrival and death probabilities are 0 and their "
                      "expected steps are undefined (nodata).", StrandedWalkWarning, stacklevel=2)
    return walk


def _patch_index(graph, patch_id, key):
    ids = graph.patch_ids
    known = isinstance(patch_id, (int, np.integer)) and not isinstance(patch_id, bool)
    hit = np.flatnonzero(ids == patch_id) if known else np.array([], dtype=np.int64)
    if hit.size == 0:
        raise InputError(f"{key}: unknown patch id {patch_id!r}; the patches are "
                         f"{', '.join(map(str, ids.tolist())) or 'none'}. Use one of these ids.")
    return int(hit[0])


def _cells_of(graph, node_mask):
    inside = graph.node_of_cell >= 0
    return int(node_mask[graph.node_of_cell[inside]].sum())


def _with_absorbing(walk, nodes):
    """The same walk (graph, mortality, solver options) with another absorbing set; reused when equal."""
    nodes = np.unique(np.asarray(nodes, dtype=np.int64))
    if np.array_equal(nodes, walk.absorbing):
        return walk
    key = tuple(nodes.tolist())
    if key not in walk.related:
        walk.related[key] = AbsorbingWalk(walk.graph, nodes, walk.kappa, method=walk.method,
                                          tolerance=walk.tolerance)
    return walk.related[key]


# -- analyses --------------------------------------------------------------------------------


def hitting_probability(walk, a, b=None):
    """P_x(reach patch A before patch B), or before any other patch when ``b`` is None, for every node x.

    h is 1 on A, 0 on B and, elsewhere, h(x) = (1 - kappa_x) sum_y P_xy h(y):
    the voltage with A held at 1 and B at 0 when each cell leaks to a grounded
    outside through the killing conductance. With ``b`` given, patches other
    than A and B do not stop the walk (it passes through them); with ``b`` None
    every other patch absorbs, and h is the absorption probability into A.
    With mortality, h counts only walkers that reach A alive.

    Parameters
    ----------
    walk : AbsorbingWalk
        Supplies graph, mortality and solver options; its factorisation is
        reused when its absorbing patches are exactly those needed here.
    a, b : int
        Patch ids.

    Returns
    -------
    ndarray, shape (n_nodes,)
        Probability (dimensionless, in [0, 1]).

    Raises
    ------
    InputError
        Unknown patch id, or A equal to B.

    Warns
    -----
    StrandedWalkWarning
        Cells from which A cannot be reached without first entering B (or
        another absorbing patch) get probability 0; the warning counts them.

    References
    ----------
    Doyle & Snell (1984), Random Walks and Electric Networks, ch. 1 (hitting
    probabilities as voltages).

    Examples
    --------
    A 1 x 5 strip with patch 1 at the left end and patch 2 at the right: the
    drunkard's walk, where P(left before right) falls linearly.

    >>> import landflow as lf
    >>> graph = lf.build_graph(lf.Grid.from_array([[1.0] * 5]), [[1, 0, 0, 0, 2]])
    >>> walk = lf.absorbing_walk(graph)
    >>> graph.to_raster(lf.hitting_probability(walk, 1, 2))
    array([[1.  , 0.75, 0.5 , 0.25, 0.  ]], dtype=float32)
    """
    graph = walk.graph
    ia = walk.patch_index(a, "patch A")
    if b is None:
        nodes = np.arange(graph.n_patches)
        what = "any other patch"
    else:
        ib = walk.patch_index(b, "patch B")
        if ia == ib:
            raise InputError(f"patch A and patch B are both {a}; a hitting probability needs two different patches "
                             "(A before B). Choose another B, or ask for A before any other patch.")
        nodes = [ia, ib]
        what = f"patch {b}"
    system = _with_absorbing(walk, nodes)
    if "_absorption" in system.__dict__:      # every absorption column already solved (the shared walk)
        h = system._absorption[:, int(np.searchsorted(system.absorbing, ia))].copy()
    else:                                     # one right-hand side, not one per absorbing patch plus death
        h = system.solve(graph.conductance[:, [ia]].toarray().ravel())
        h[ia] = 1.0
    # reachability of A without entering another absorbing patch
    keep = ~system.is_absorbing
    keep[ia] = True
    weights = sp.diags_array(keep.astype(float))
    pieces = connected_components(weights @ graph.conductance @ weights, directed=False)[1]
    unreachable = keep & (pieces != pieces[ia])
    h[unreachable] = 0.0
    cells = _cells_of(graph, unreachable)
    if cells:
        warnings.warn(f"{cells} cell(s) cannot reach patch {a} without first entering {what} (or lie in another "
                      f"piece of the landscape); their probability of reaching patch {a} first is 0.",
                      StrandedWalkWarning, stacklevel=2)
    return h


def absorption_probability(walk):
    """Probability that the first patch a walker from x enters is each absorbing patch, and of death first.

    B[x, a] = P_x(first absorbing patch entered is a) = (N R)[x, a], solved as
    G B = c_{., a} with one factorisation and one right-hand side per patch
    (plus one for death, G d = g). A walker starting on a patch is already
    absorbed there (row of the identity). Without mortality each row sums to
    1 (except on stranded nodes, where all are 0); with it,
    sum_a B[x, a] = 1 - P_x(death).

    Returns
    -------
    probability : ndarray, shape (n_nodes, m)
        One column per absorbing patch, in ``walk.absorbing`` order.
    death : ndarray, shape (n_nodes,)
        P_x(death before reaching any absorbing patch).
    """
    full = walk._absorption
    return full[:, :-1].copy(), full[:, -1].copy()


def most_likely_destination(walk, probability=None):
    """Patch id with the largest absorption probability at each node; 0 where every probability is 0.

    Death is not a destination here: where dying is the likeliest fate, this
    still names the likeliest patch among those reached alive.
    """
    if probability is None:
        probability = absorption_probability(walk)[0]
    ids = walk.graph.patch_ids[walk.absorbing]
    best = ids[np.argmax(probability, axis=1)]
    return np.where(probability.max(axis=1) > 0, best, 0)


def release_distribution(graph, a):
    """Where walkers released from patch node a start: mu_x = c_ax / C_a over a's neighbours.

    These are the cells on a's boundary (and any patch touching a), weighted
    by the conductance of the edges leaving a: the first hop of a walk from a.
    """
    row = graph.conductance[[a], :].toarray().ravel()
    total = row.sum()
    return row / total if total > 0 else row


def _release_outcomes(walk, a):
    """For walkers released from patch node a (a absorbing in ``walk``): arrival at each other patch, death,
    and the escape probability (leaving a for good), with returns to a followed by a new release."""
    per, death = walk._release(a)
    col = int(np.searchsorted(walk.absorbing, a))
    others = np.delete(per, col)
    escape = others.sum() + death          # = 1 - P(return to a), computed without cancellation
    if escape <= 0:
        return np.zeros_like(per), 0.0, 0.0
    arrival = per / escape
    arrival[col] = 0.0
    return arrival, death / escape, escape


def arrival_table(walk):
    """Long-form table: for walkers released from each patch a, where they arrive first, or that they die.

    A walker released from a leaves a by one hop, drawn in proportion to the
    conductance of the edges leaving a (:func:`release_distribution`), so it
    starts on the cells along a's boundary. Returning to a does not end the
    walk: it leaves again the same way. The walk ends on entering any other
    patch b (arrival) or on death. With p_ab the probability that one
    excursion ends at b (a included) and p_a,death that it ends in death,

        P(arrive first at b) = p_ab / (1 - p_aa),  P(death) = p_a,death / (1 - p_aa),

    by the strong Markov property. Without mortality each release patch's
    probabilities sum to 1, unless no other patch is reachable (then all are
    0 and a warning names the patch).

    Returns
    -------
    pandas.DataFrame
        Columns ``release_patch, outcome, arrival_patch, probability``;
        ``outcome`` is "arrival" (``arrival_patch`` set) or "death"
        (``arrival_patch`` empty). One death row per release patch, 0 without
        mortality.
    """
    graph = walk.graph
    ids = graph.patch_ids
    _check_all_absorbing(walk)
    rows = []
    isolated = []
    for a in range(graph.n_patches):
        arrival, death, escape = _release_outcomes(walk, a)
        if escape == 0:
            isolated.append(int(ids[a]))
        for b in range(graph.n_patches):
            if b != a:
                rows.append((int(ids[a]), "arrival", int(ids[b]), float(arrival[b])))
        rows.append((int(ids[a]), "death", pd.NA, float(death)))
    if isolated:
        warnings.warn(f"walkers released from patch(es) {', '.join(map(str, isolated))} can reach no other patch "
                      "and cannot die: their arrival probabilities are 0.", StrandedWalkWarning, stacklevel=2)
    table = pd.DataFrame(rows, columns=["release_patch", "outcome", "arrival_patch", "probability"])
    table["arrival_patch"] = table["arrival_patch"].astype("Int64")
    return table


def _check_all_absorbing(walk):
    if walk.absorbing.size != walk.graph.n_patches:
        raise InputError("this analysis needs every patch absorbing; build the walk with absorbing=None.")


def expected_steps(walk, crossing_time=None):
    """Expected number of steps (or time) until the walk from each node is absorbed or dies.

    t = N 1, the expected number of visits to transient nodes before
    absorption, which is the number of hops including the last one into a
    patch (or the step in which the walker dies) (Kemeny & Snell 1960; Grinstead
    & Snell 1997, section 11.2). Solved as G t = C + g. With a per-node
    crossing time tau (time spent per visit), the expected time is
    N tau = G^-1 ((C + g) tau), in the units of tau.

    Returns
    -------
    ndarray, shape (n_nodes,)
        0 on absorbing patches, ``inf`` on stranded nodes. Units: steps, or
        the units of ``crossing_time``.

    Examples
    --------
    The drunkard's walk on five states, absorbing at both ends: t = (3, 4, 3)
    (Grinstead & Snell 1997, section 11.2).

    >>> import landflow as lf
    >>> graph = lf.build_graph(lf.Grid.from_array([[1.0] * 5]), [[1, 0, 0, 0, 2]])
    >>> graph.to_raster(lf.expected_steps(lf.absorbing_walk(graph)))
    array([[0., 3., 4., 3., 0.]], dtype=float32)
    """
    weight = walk.departure_conductance
    if crossing_time is not None:
        weight = weight * np.asarray(crossing_time, dtype=np.float64)
    t = walk.solve(weight)
    t[walk.stranded] = np.inf
    return t


def release_expected_steps(walk, crossing_time=None, *, steps=None, time=None):
    """Expected steps (and time) from release at each patch until arrival at another patch or death.

    With t the per-node expected steps and mu_a the release distribution, one
    excursion from a lasts 1 + mu_a . t steps (the hop out of a, then the walk
    until absorption); by Wald's identity the whole walk lasts, on average,

        T_a = (1 + mu_a . t) / e_a,    e_a = 1 - P(return to a),

    and the expected time (no time is spent inside patches) is (mu_a . t_tau) / e_a.

    Parameters
    ----------
    walk : AbsorbingWalk
        Every patch absorbing.
    crossing_time : ndarray, shape (n_nodes,), optional
        Per-node crossing time (:func:`node_crossing_time`).
    steps, time : ndarray, shape (n_nodes,), optional
        ``expected_steps(walk)`` and ``expected_steps(walk, crossing_time)``
        when already computed; each saves one solve.

    Returns
    -------
    pandas.DataFrame
        Columns ``release_patch, expected_steps`` and, with crossing times,
        ``expected_time``. ``inf`` where the walk from a never ends.
    """
    _check_all_absorbing(walk)
    graph = walk.graph
    t = expected_steps(walk) if steps is None else steps
    tt = None
    if crossing_time is not None:
        tt = expected_steps(walk, crossing_time) if time is None else time
    out = {"release_patch": [int(p) for p in graph.patch_ids], "expected_steps": []}
    if tt is not None:
        out["expected_time"] = []
    for a in range(graph.n_patches):
        _, _, escape = _release_outcomes(walk, a)
        mu = release_distribution(graph, a)
        out["expected_steps"].append((1.0 + mu @ t) / escape if escape > 0 else np.inf)
        if tt is not None:
            out["expected_time"].append((mu @ tt) / escape if escape > 0 else np.inf)
    return pd.DataFrame(out)


def expected_visits(walk, *, release_patch=None, source=None):
    """Expected number of visits to each node by walkers released from a patch or from sources, until absorbed.

    From a start distribution mu over transient nodes, the expected visits are
    mu N, computed as (C + g) * G^-1 mu (G is symmetric, N = G^-1 D). Released
    from patch a (see :func:`arrival_table`), returns to a start a new
    excursion, so visits = (C + g) * G^-1 mu_a / e_a with e_a the escape
    probability, and patch a itself gets 1 / e_a visits (departures).
    Without mortality and with one other patch b, visits_x / C_x is the
    voltage at x for a unit current from a to b with b grounded (Lyons &
    Peres 2016, ch. 2; Doyle & Snell 1984).

    Parameters
    ----------
    walk : AbsorbingWalk
        Every patch absorbing.
    release_patch : int, optional
        Patch id; one walker released from it.
    source : ndarray, shape (n_nodes,), optional
        Walkers released per node (:func:`node_source`): on a transient node
        they start there; on a patch node they are released from that patch.

    Returns
    -------
    ndarray, shape (n_nodes,)
        Expected visits (per walker released, or per unit of source). Other
        patches, where walkers stop, get 0; so do stranded nodes, which no
        walker from a node where walks end can reach.

    Raises
    ------
    InputError
        Neither or both of ``release_patch`` and ``source``; an unknown patch
        id; a source of the wrong length; walkers released where no walk
        ends (a patch that reaches no other patch without mortality, or a
        stranded node), since their visits would be infinite.
    """
    _check_all_absorbing(walk)
    graph = walk.graph
    k = graph.n_patches
    if (release_patch is None) == (source is None):
        raise InputError("expected_visits needs exactly one of release_patch (a patch id) or source "
                         "(a per-node release weight).")
    if release_patch is not None:
        s = np.zeros(graph.n_nodes)
        s[walk.patch_index(release_patch, "release patch")] = 1.0
    else:
        s = np.asarray(source, dtype=np.float64)
        if s.shape != (graph.n_nodes,):
            raise InputError(f"source must give one value per node ({graph.n_nodes}); got shape {s.shape}.")
    start = s.copy()
    start[:k] = 0.0
    departures = np.zeros(graph.n_nodes)
    for a in np.flatnonzero(s[:k]):
        _, _, escape = _release_outcomes(walk, a)
        if escape == 0:
            raise InputError(f"walkers released from patch {graph.patch_ids[a]} can reach no other patch and cannot "
                             "die, so they never stop and their visits are infinite. Release them elsewhere or "
                             "add mortality.")
        departures[a] = s[a] / escape
        start += departures[a] * release_distribution(graph, a)
    start[:k] = 0.0                      # direct hops into another patch end the walk at once
    stranded_start = start[walk.stranded].sum()
    if stranded_start > 0:
        raise InputError(f"{int((start[walk.stranded] > 0).sum())} released node(s) lie where no walk ends "
                         "(no patch and no mortality in their piece of the landscape): their visits are infinite. "
                         "Release walkers elsewhere or add mortality.")
    visits = walk.departure_conductance * walk.solve(start)
    visits[:k] = departures[:k]
    return visits
