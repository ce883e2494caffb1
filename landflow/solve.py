"""Solvers for grounded Laplacian systems: factorise or set up once, solve many right-hand sides.

Two backends behind one interface:

* ``direct``: sparse LU factorisation (SuperLU through :func:`scipy.sparse.linalg.splu`)
  with a symmetric fill-reducing ordering. Exact to rounding; best up to a few
  million cells and for many right-hand sides.
* ``multigrid``: smoothed-aggregation algebraic multigrid (:mod:`pyamg`) as a
  preconditioner for conjugate gradients. Memory grows linearly with the grid;
  best for the largest grids and few right-hand sides.

``auto`` picks between them by the number of unknowns (see :data:`DIRECT_MAX_UNKNOWNS`).
Every solve computes its relative residual ``||b - A x|| / ||b||``; the solver
keeps the worst one and raises :class:`SolverError` past its tolerance.
"""

from __future__ import annotations

import threading
import time

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from .errors import SolverError

__all__ = ["factorize", "Solver", "METHODS", "DIRECT_MAX_UNKNOWNS", "choose_method"]

METHODS = ("auto", "direct", "multigrid")

#: Above this many unknowns ``auto`` uses multigrid (the direct factor's memory
#: grows faster than linearly in the grid size).
DIRECT_MAX_UNKNOWNS = 4_000_000

#: Relative residual a direct solve may show before it counts as failed.
DIRECT_RESIDUAL_LIMIT = 1e-6


def choose_method(n_unknowns, n_rhs=1):
    """The backend ``auto`` uses for a system of this size."""
    return "direct" if n_unknowns <= DIRECT_MAX_UNKNOWNS else "multigrid"


class Solver:
    """A prepared system ``A x = b``: call :meth:`solve` as often as needed.

    Attributes
    ----------
    method : str
        ``"direct"`` or ``"multigrid"``.
    setup_seconds : float
    worst_residual : float
        The largest relative residual seen so far.
    iterations : list of int
        CG iterations per right-hand side (multigrid only).
    """

    def __init__(self, matrix, method, tolerance):
        self.matrix = matrix
        self.method = method
        self.tolerance = tolerance
        self.worst_residual = 0.0
        self.iterations = []
        self.n_solved = 0
        self.solve_seconds = 0.0
        start = time.perf_counter()
        if method == "direct":
            try:
                self._lu = sla.splu(matrix.tocsc(), permc_spec="MMD_AT_PLUS_A",
                                    diag_pivot_thresh=0.0, options={"SymmetricMode": True})
            except RuntimeError as exc:  # singular: an ungrounded component
                raise SolverError(f"direct factorisation failed: {exc}. The system is singular: some part of "
                                  "the graph is not tied to a grounded node (an ungrounded Laplacian).") from exc
        else:
            self._ml = _multigrid_hierarchy(matrix.tocsr())
        self.setup_seconds = time.perf_counter() - start

    def __repr__(self):
        return (f"Solver(method={self.method!r}, unknowns={self.matrix.shape[0]}, "
                f"solved={self.n_solved}, worst_residual={self.worst_residual:.2e})")

    def solve(self, b):
        """Solve for one right-hand side (n,) or several (n, m); returns float64 of b's shape."""
        b = np.asarray(b, dtype=np.float64)
        start = time.perf_counter()
        if self.method == "direct":
            x = self._lu.solve(b)
            limit = max(DIRECT_RESIDUAL_LIMIT, self.tolerance)
        else:
            x = np.column_stack([self._cg(col) for col in b.reshape(b.shape[0], -1).T]).reshape(b.shape)
            limit = self.tolerance * 10  # CG stops on a preconditioned norm; allow that slack
        residual = _relative_residual(self.matrix, x, b)
        self.worst_residual = max(self.worst_residual, residual)
        self.n_solved += 1 if b.ndim == 1 else b.shape[1]
        self.solve_seconds += time.perf_counter() - start
        if not residual <= limit:
            fix = ("The system is singular or nearly so (an ungrounded part of the graph?)."
                   if self.method == "direct" else "Try solver method 'direct' or a looser tolerance.")
            raise SolverError(
                f"{self.method} solve reached relative residual {residual:.2e}, above {limit:.0e}. {fix}",
                residual=residual,
                iterations=self.iterations[-1] if self.iterations else None)
        return x

    def _cg(self, b):
        residuals = []
        x = self._ml.solve(b, tol=self.tolerance, accel="cg", maxiter=500, residuals=residuals)
        self.iterations.append(len(residuals) - 1)
        return x

    def record(self):
        """A JSON-ready summary for the manifest."""
        out = {"method": self.method, "unknowns": int(self.matrix.shape[0]),
               "right_hand_sides": self.n_solved, "worst_relative_residual": float(self.worst_residual),
               "setup_seconds": round(self.setup_seconds, 3), "solve_seconds": round(self.solve_seconds, 3)}
        if self.iterations:
            out["cg_iterations_max"] = int(max(self.iterations))
        return out


_SEED_LOCK = threading.Lock()


def _multigrid_hierarchy(matrix):
    """pyamg's smoothed-aggregation hierarchy, built reproducibly.

    pyamg estimates spectral radii from a random start vector drawn from
    numpy's global generator, so two builds differ in the last digits; its
    documentation advises seeding that generator. The seed is set for the
    build only and the caller's generator state restored.
    """
    import pyamg

    with _SEED_LOCK:
        state = np.random.get_state()
        np.random.seed(0)
        try:
            return pyamg.smoothed_aggregation_solver(matrix, symmetry="symmetric")
        finally:
            np.random.set_state(state)


def factorize(matrix, *, method="auto", tolerance=1e-8, n_rhs=1):
    """Prepare a symmetric positive definite sparse system for repeated solves.

    Parameters
    ----------
    matrix : sparse array, shape (n, n)
        A grounded Laplacian (or another SPD M-matrix).
    method : {"auto", "direct", "multigrid"}
    tolerance : float
        Relative residual target of the multigrid solves; direct solves are
        checked against ``max(tolerance, 1e-6)``.
    n_rhs : int
        How many right-hand sides are expected; informs ``auto``.

    Returns
    -------
    Solver
    """
    if method not in METHODS:
        raise SolverError(f"solver method must be one of {', '.join(METHODS)}; got {method!r}.")
    if method == "auto":
        method = choose_method(matrix.shape[0], n_rhs)
    return Solver(sp.csr_array(matrix), method, tolerance)


def _relative_residual(matrix, x, b):
    r = b - matrix @ x
    norm_b = np.linalg.norm(b)
    return float(np.linalg.norm(r) / norm_b) if norm_b > 0 else float(np.linalg.norm(r))
