"""Effective resistance among patches, from k - 1 grounded solves per component."""

from __future__ import annotations

import contextlib
import logging
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import scipy.sparse as sp

from ..errors import InputError
from ..graph import nested_dissection_order
from ..solve import (available_memory, choose_method, compute_threads, direct_engine, factor_bytes, factorize,
                     grounded_lower, grounded_matrix, on_threads)

log = logging.getLogger("landflow")

__all__ = ["PatchVoltages", "patch_voltages", "effective_resistance", "resistance_table"]

#: Numbers per block of right-hand sides (16 M: 128 MB of float64; see :func:`rhs_blocks`).
RHS_BLOCK_VALUES = 1 << 24


def rhs_blocks(columns, unknowns):
    """Column ranges ``(first, stop)`` that share ``columns`` right-hand sides of ``unknowns`` rows into blocks.

    Blocks of about :data:`RHS_BLOCK_VALUES` numbers, evened out, so that the solver's temporary copies
    stay small next to the factor whatever the number of patches. A remainder under half a block joins
    the others (blocks of up to 1.5 times the size) rather than costing a pass of its own over the factor:
    19 columns at a million unknowns go as one block, not 16 and 3.
    """
    width = max(1, RHS_BLOCK_VALUES // max(unknowns, 1))
    count = max(1, int(columns / width + 0.5))          # half a block rounds up to a block of its own
    bounds = np.linspace(0, columns, count + 1).round().astype(int)
    return [(int(lo), int(hi)) for lo, hi in zip(bounds[:-1], bounds[1:]) if hi > lo]


@dataclass(eq=False)
class PatchVoltages:
    """Voltages for unit currents between every patch and its component's ground patch.

    Column ``a`` of :attr:`potential` is the voltage at every node when a unit
    current enters at patch ``a`` and leaves at the ground patch of ``a``'s
    connected component (whose own column is zero, as are nodes of other
    components). For patches a, b in one component, the voltage of a unit
    current from a to b is ``potential[:, a] - potential[:, b]`` (up to a constant)
    and ``R_ab = U_aa + U_bb - 2 U_ab``.

    Attributes
    ----------
    potential : ndarray, shape (n_nodes, k)
    component_of_patch : ndarray of int, shape (k,)
    solvers : list of Solver
        One per component with two or more patches (for the manifest).
    """

    graph: object
    potential: np.ndarray
    component_of_patch: np.ndarray
    solvers: list = field(default_factory=list)

    def connected(self, a, b):
        return self.component_of_patch[a] == self.component_of_patch[b]

    def pair_voltage(self, a, b):
        """Voltage for unit current from patch a to patch b, with v_b = 0 (so v_a = R_ab).

        Nodes in other components get NaN.
        """
        if not self.connected(a, b):
            raise InputError(f"patches {self.graph.patch_ids[a]} and {self.graph.patch_ids[b]} "
                             "are not connected: no current flows between them.")
        v = self.potential[:, a] - self.potential[:, b]
        v = v - v[b]
        v[self.graph.components != self.component_of_patch[a]] = np.nan
        return v


def patch_voltages(graph, *, method="auto", tolerance=1e-8, progress=None):
    """Solve the grounded systems behind all pairwise patch quantities.

    For each connected component holding patches p_0 < p_1 < ... < p_m, the
    Laplacian restricted to the component is grounded at p_0 and solved once
    with m right-hand sides (unit current at p_1 .. p_m): k - 1 solves in all
    for a connected landscape, instead of k (k - 1) / 2 independent ones.

    Parameters
    ----------
    graph : CellGraph
    method, tolerance : passed to :func:`landflow.solve.factorize`.
    progress : callable(str), optional
        Called with a short message before each factorisation.

    Returns
    -------
    PatchVoltages

    Notes
    -----
    With the SuperLU and CHOLMOD engines the unknowns are put in the
    geometric nested-dissection order of
    :func:`landflow.graph.nested_dissection_order`, and the system is made in
    that order straight from the graph (:func:`landflow.solve.grounded_matrix`).
    Each solver's factor is freed once its solves are done (``solvers`` keep
    their statistics for the manifest); then every solve's residual is checked
    on the graph's nodes, one sparse product per block of right-hand sides.
    """
    k = graph.n_patches
    if k < 2:
        raise InputError(f"at least two patches are needed for pairwise analyses; found {k}. "
                         "Add patches or check the patch labels.")
    comp = graph.components
    comp_of_patch = comp[:k]
    n_nodes = graph.n_nodes
    # np.zeros takes its pages from the system only as they are written. Where the factor leaves room
    # they are taken now, while the process's memory is young and pages come fast (0.03 s for a million
    # nodes and 20 patches, against 0.2 s of page faults when the solutions were first written into them
    # after the factorisation, on the 1000 x 1000 benchmark); where it will fill the memory, only as the
    # solutions are written, so that the factorisation's peak comes without them.
    potential = np.zeros((n_nodes, k))
    if not _tight(n_nodes, direct_engine()):
        potential.fill(0.0)
    order = None
    solvers = []
    grounded = [c for c in np.unique(comp_of_patch) if np.count_nonzero(comp_of_patch == c) >= 2]
    for c in grounded:
        members = np.flatnonzero(comp_of_patch == c)
        ground = members[0]
        n_unknowns = int(np.count_nonzero(comp == c)) - 1
        wanted = (choose_method(n_unknowns, members.size - 1, memory=available_memory())
                  if method == "auto" else method)
        engine = direct_engine() if wanted == "direct" else wanted
        ordering = None
        if engine in ("superlu", "cholmod") and order is None:
            # Unknowns in nested-dissection order: the factor is then far sparser than with
            # SuperLU's own minimum-degree ordering on a grid, and CHOLMOD's symbolic analysis
            # is faster than with its AMD ordering (docs/performance.md).
            order = nested_dissection_order(graph)
        if engine in ("superlu", "cholmod"):
            # The unknowns are the component's nodes in elimination order, so that the engine is handed
            # its system already ordered and the right-hand sides and solutions need no permuted copies.
            keep = order[(comp[order] == c) & (order != ground)]
            ordering = np.arange(keep.size)
        else:
            keep = np.flatnonzero(comp == c)
            keep = keep[keep != ground]
        # the whole graph grounded at node 0, in natural order: a slice, without index arrays
        sliced = keep.size == n_nodes - 1 and ground == 0 and ordering is None
        rows = slice(1, None) if sliced else keep
        if progress:
            progress(f"solving component with {keep.size:,} unknowns and {members.size} patches")
        position = _positions(keep, members[1:])
        # Every piece of a connected component less one node touches that node, so the system is grounded
        # by construction and factorize need not look for loose pieces. The grounded matrix is handed over
        # as factorize's only reference (popped from a dict) and the residuals come from the graph
        # (product), so that factorize can let the matrix go once the engine has its own copy: the
        # factor's peak comes without it. The residuals are checked once the factor is released.
        # The system is made from the graph's rows (solve.grounded_matrix), in the unknowns' order: no
        # Laplacian, grounded submatrix or permuted copy is formed. CHOLMOD reads its lower triangle.
        if engine == "cholmod":
            system = {"matrix": None, "lower": grounded_lower(graph.conductance, graph.total_conductance, keep)}
        elif sliced:
            system = {"matrix": graph.laplacian()[1:, 1:], "lower": None}
        else:
            system = {"matrix": grounded_matrix(graph.conductance, graph.total_conductance, keep), "lower": None}
        with _conductance_set_aside(graph, engine in ("superlu", "cholmod", "pardiso") and _tight(keep.size, engine)):
            solver = factorize(system.pop("matrix"), lower=system.pop("lower"), method=wanted, tolerance=tolerance,
                               n_rhs=members.size - 1, ordering=ordering, pieces_grounded=True,
                               fallback=method == "auto", product=_grounded_product(graph, rows, n_nodes))
            blocks = []
            # Right-hand sides go in blocks of about RHS_BLOCK_VALUES numbers (rhs_blocks), so that the
            # solver's temporary copies stay small next to the factor whatever k is (one column at a time
            # from 16 million unknowns on). Column-major, as the direct engines take and give them.
            for first, stop in rhs_blocks(members.size - 1, keep.size):
                cols = np.arange(first, stop)
                solution = solver.solve(_unit_currents(keep.size, position[cols]), check=False)
                targets = members[1 + cols]
                if np.all(np.diff(targets) == 1):          # neighbouring columns: a slice, not an index array
                    targets = slice(int(targets[0]), int(targets[-1]) + 1)
                if sliced or isinstance(targets, slice):     # at most one index array: plain indexing
                    potential[rows, targets] = solution
                else:
                    potential[np.ix_(keep, targets)] = solution
                blocks.append((cols, targets))
                del solution
            solver.release()
        for cols, targets in blocks:
            start = time.perf_counter()
            worst = _worst_residual(graph, potential, ground, members[1 + cols], targets)
            solver.accept_residual(worst, seconds=time.perf_counter() - start)
        solvers.append(solver)
    return PatchVoltages(graph, potential, comp_of_patch, solvers)


def effective_resistance(voltages):
    """The k x k matrix of effective resistance between patches.

    R_ab = U_aa + U_bb - 2 U_ab (Klein & Randic 1993, "Resistance distance",
    J. Math. Chem. 12:81, doi:10.1007/BF01164627); ``inf`` between patches in
    different connected components, 0 on the diagonal. Units: the surface's
    resistance unit times its map unit (resistance is per unit length).
    """
    k = voltages.graph.n_patches
    u = voltages.potential[:k, :k]
    d = np.diag(u)
    r = d[:, None] + d[None, :] - u - u.T
    r = 0.5 * (r + r.T)             # exactly symmetric (rounding differs with the order of terms)
    same = voltages.component_of_patch[:, None] == voltages.component_of_patch[None, :]
    r = np.where(same, r, np.inf)
    np.fill_diagonal(r, 0.0)
    return r


def resistance_table(voltages, resistance=None):
    """Long-form table: one row per unordered patch pair.

    Columns: ``patch_a, patch_b, resistance, escape_probability_a_to_b,
    escape_probability_b_to_a, commute_time``.

    * escape probability from a towards b: the chance that a walker leaving a
      reaches b before returning to a, ``1 / (C_a R_ab)`` with C_a the total
      conductance of the edges leaving a (Doyle & Snell 1984, Random Walks and
      Electric Networks, section 1.3.4).
    * commute time: expected steps of the walk from a to b and back,
      ``2 W R_ab`` with W the summed edge conductance of their component
      (Chandra et al. 1996, Computational Complexity 6:312, doi:10.1007/BF01270385).
    """
    graph = voltages.graph
    if resistance is None:
        resistance = effective_resistance(voltages)
    k = graph.n_patches
    a, b = np.triu_indices(k, 1)
    r = resistance[a, b]
    c_out = graph.total_conductance[:k]
    # W per component: every edge counted once is half the summed total conductance of its nodes
    volume = 0.5 * np.bincount(graph.components, weights=graph.total_conductance)
    vol_ab = volume[voltages.component_of_patch[a]]
    apart = np.isinf(r)             # a walk never reaches the other patch, even from an isolated patch
    with np.errstate(divide="ignore", invalid="ignore"):
        table = pd.DataFrame({
            "patch_a": graph.patch_ids[a], "patch_b": graph.patch_ids[b], "resistance": r,
            "escape_probability_a_to_b": np.where(apart, 0.0, 1.0 / (c_out[a] * r)),
            "escape_probability_b_to_a": np.where(apart, 0.0, 1.0 / (c_out[b] * r)),
            "commute_time": np.where(apart, np.inf, 2.0 * vol_ab * r),
        })
    return table


def _grounded_product(graph, rows, n_nodes):
    """x -> L[rows][:, rows] @ x (one column or several), from the graph's conductance: L x = C_x x - A x.

    The residual checks of the solves use it instead of the grounded matrix, which is then freed once
    factorised: on 16 million cells that matrix takes 1.7 GB next to the factor.
    """
    diagonal = graph.total_conductance

    def product(x):
        full = np.zeros((n_nodes,) + x.shape[1:])
        full[rows] = x
        out = graph.conductance @ full
        np.subtract(diagonal.reshape((-1,) + (1,) * (x.ndim - 1)) * full, out, out=out)
        return out[rows]
    return product


def _worst_residual(graph, potential, ground, sources, columns):
    """The worst relative residual of the solves behind ``potential[:, columns]``, on the graph's nodes.

    Column j is the grounded solution for a unit current into node ``sources[j]``, zero at ``ground`` and
    outside its component, so its residual over the unknowns, ``||e_source - L_g x||``, is that of
    ``L x - e_source`` on every node but the ground, with L = diag(C) - A the whole graph's Laplacian (the
    component's other rows are the unknowns'; rows elsewhere are 0). Sparse products on bands of rows serve
    the block, on the potentials as stored: no gathered copy in the engine's order is made. The
    right-hand sides have norm 1, so the residuals are relative.
    """
    x = np.ascontiguousarray(potential[:, columns])      # one copy: scipy's product would make one per call
    adjacency, diagonal = graph.conductance, graph.total_conductance
    n = x.shape[0]
    sources = np.asarray(sources)

    def band(lo):
        """The squared residual of every column over the rows lo .. lo + RESIDUAL_ROWS - 1."""
        hi = min(lo + RESIDUAL_ROWS, n)
        first, last = adjacency.indptr[lo], adjacency.indptr[hi]
        rows = sp.csr_array((adjacency.data[first:last], adjacency.indices[first:last],
                             adjacency.indptr[lo:hi + 1] - first), shape=(hi - lo, n))
        r = rows @ x
        np.subtract(diagonal[lo:hi, None] * x[lo:hi], r, out=r)
        if lo <= ground < hi:
            r[ground - lo] = 0.0
        here = np.flatnonzero((sources >= lo) & (sources < hi))
        r[sources[here] - lo, here] -= 1.0
        return np.einsum("ij,ij->j", r, r)

    # Bands of rows small enough that their temporaries are reused from one band to the next, shared among
    # one thread per core (scipy's sparse products and numpy's sums release the GIL): no temporary of the
    # block's size is made, whose pages would each fault on first use after the factorisation.
    starts = range(0, n, RESIDUAL_ROWS)
    threads = max(1, min(compute_threads(), len(starts)))
    squares = sum(on_threads(lambda share: sum(map(band, share)), [starts[t::threads] for t in range(threads)]))
    return float(np.sqrt(squares).max())


#: Rows per band of the residual check (:func:`_worst_residual`).
RESIDUAL_ROWS = 1 << 15


def _unit_currents(n, positions):
    """Right-hand sides of unit current into the unknowns ``positions``, one column each (column-major)."""
    rhs = np.zeros((n, len(positions)), order="F")
    rhs[positions, np.arange(len(positions))] = 1.0
    return rhs


#: A direct factor expected to take more than this share of the memory available sets the graph's
#: conductance matrix aside on disk while it is made and used (:func:`_conductance_set_aside`).
SET_ASIDE_SHARE = 0.5


def _tight(n_unknowns, engine):
    """Whether the direct factor of ``n_unknowns`` is expected to take over SET_ASIDE_SHARE of the memory."""
    memory = available_memory()
    return memory is not None and factor_bytes(n_unknowns, engine) > SET_ASIDE_SHARE * memory


@contextlib.contextmanager
def _conductance_set_aside(graph, wanted=True):
    """Keep the graph's conductance matrix in a temporary file, not in memory, inside the block.

    For factors that fill most of the memory: on 16 million cells the matrix takes 1.7 GB beside a 12 GB
    factor, and nothing needs it while the factor is made and used once the residual checks wait for the
    factor's release. ``graph.conductance`` is None inside the block and is read back on leaving it, also
    on an error. The file goes to the temporary folder (``TMPDIR``); where it cannot be written, the
    matrix stays in memory and the reason is logged.
    """
    if not wanted:
        yield
        return
    matrix = graph.conductance
    with tempfile.TemporaryDirectory(prefix="landflow-graph-") as folder:
        path = Path(folder) / "conductance.npz"
        try:
            np.savez(path, data=matrix.data, indices=matrix.indices, indptr=matrix.indptr)
        except OSError as exc:
            log.info("solver: the graph stays in memory during the factorisation: %s could not be written (%s)",
                     path, exc)
            yield
            return
        shape = matrix.shape
        log.info("solver: graph's conductance matrix (%.1f GB) set aside in %s while the factor is in memory",
                 (matrix.data.nbytes + matrix.indices.nbytes + matrix.indptr.nbytes) / 1e9, folder)
        graph.conductance = matrix = None
        try:
            yield
        finally:
            with np.load(path) as arrays:
                graph.conductance = sp.csr_array((arrays["data"], arrays["indices"], arrays["indptr"]),
                                                 shape=shape)


def _symmetric_submatrix(matrix, keep):
    """``matrix[keep][:, keep]`` of a symmetric CSR matrix, with sorted indices, by two row gathers.

    Gathering rows is cheap in CSR and gathering columns is not; for a symmetric matrix the columns
    ``keep`` of the gathered rows are the rows ``keep`` of their transpose (0.1 s against scipy's 0.4 s
    for column indexing at a million unknowns, on a quiet machine).
    """
    rows = matrix[keep]
    columns = rows.tocsc()          # the transpose of rows, read as CSR: sorted indices
    transposed = sp.csr_array((columns.data, columns.indices, columns.indptr), shape=rows.shape[::-1])
    del rows, columns
    return transposed[keep]


def _positions(keep, nodes):
    """Where each of ``nodes`` sits in ``keep`` (which need not be sorted)."""
    if keep.size < 2 or np.all(keep[1:] > keep[:-1]):
        return np.searchsorted(keep, nodes)
    where = np.full(int(keep.max()) + 1, -1, dtype=np.int64)
    where[keep] = np.arange(keep.size)
    return where[nodes]
