"""Solvers for grounded Laplacian systems: factorise or set up once, solve many right-hand sides.

Two backends behind one interface:

* ``direct``: sparse factorisation, exact to rounding; best up to a few
  million cells and for many right-hand sides. Two engines:

  - ``superlu``: SuperLU through :func:`scipy.sparse.linalg.splu`, always
    available. Given a fill-reducing ``ordering`` (for grids,
    :func:`landflow.graph.nested_dissection_order`) it factorises the
    permuted matrix in that order; otherwise it uses SuperLU's minimum degree
    ordering of A^T + A.
  - ``cholmod``: CHOLMOD's supernodal Cholesky factorisation (SuiteSparse)
    through the optional :mod:`cvxopt` package (``pip install landflow[fast]``;
    cvxopt is GPL-3 licensed, which is why it is optional). Its symbolic and
    numeric phases run on landflow's arrays through the CHOLMOD library cvxopt
    ships, which spares cvxopt's copies of the matrix (:func:`_cholmod_factor`).
  - ``pardiso``: Intel MKL Pardiso through the optional :mod:`pypardiso`
    package (``pip install landflow[fast]``, x86-64 only), a multithreaded
    Cholesky-type factorisation with its own nested-dissection ordering.

  Method ``direct`` uses the first engine of :data:`DIRECT_ENGINES` that is
  installed; methods ``superlu``, ``cholmod`` and ``pardiso`` ask for one.
* ``multigrid``: smoothed-aggregation algebraic multigrid (:mod:`pyamg`) as a
  preconditioner for conjugate gradients. Memory grows linearly with the grid;
  best for the largest grids and few right-hand sides.

``auto`` picks between them by the number of unknowns and right-hand sides,
following crossovers measured with ``benchmarks/run_benchmarks.py --case
crossover`` (see :func:`choose_method` and docs/performance.md).
Every solve computes its relative residual ``||b - A x|| / ||b||``; the solver
keeps the worst one and raises :class:`SolverError` past its tolerance.
"""

from __future__ import annotations

import contextlib
import contextvars
import importlib.util
import logging
import os
import sys
import threading
import time
from pathlib import Path

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from .errors import SolverError

log = logging.getLogger("landflow")

__all__ = ["factorize", "Solver", "METHODS", "DIRECT_MAX_UNKNOWNS", "DIRECT_ALWAYS_UNKNOWNS", "DIRECT_MIN_RHS",
           "choose_method", "direct_engine", "factor_bytes", "available_memory", "grounded_lower", "grounded_matrix",
           "when_engine_starts"]

METHODS = ("auto", "direct", "multigrid", "superlu", "pardiso", "cholmod")

#: The direct engines, fastest first on the 1000 x 1000, 20-patch benchmark (docs/performance.md);
#: ``direct`` takes the first one installed.
DIRECT_ENGINES = ("cholmod", "pardiso", "superlu")

#: Above this many unknowns ``auto`` uses multigrid whatever the number of
#: right-hand sides: the direct factor's memory grows as n log n (8.2 GB for SuperLU,
#: 6.5 GB for Pardiso at 4 million unknowns, measured; docs/performance.md).
DIRECT_MAX_UNKNOWNS = 4_000_000

#: Up to this many unknowns the direct engines win even for one right-hand side
#: (measured break-even below one right-hand side at 1 million unknowns).
DIRECT_ALWAYS_UNKNOWNS = 1_500_000

#: Between DIRECT_ALWAYS_UNKNOWNS and DIRECT_MAX_UNKNOWNS, ``auto`` factorises only
#: for at least this many right-hand sides (measured break-even: 5 at 4 million).
DIRECT_MIN_RHS = 5

#: Relative residual a direct solve may show before it counts as failed.
DIRECT_RESIDUAL_LIMIT = 1e-6


#: What to call when the next direct factorisation of this context hands over to its compiled engine
#: (:func:`when_engine_starts`).
_ENGINE_STARTING = contextvars.ContextVar("landflow_engine_starting", default=None)


@contextlib.contextmanager
def when_engine_starts(start):
    """Call ``start()`` once, when a direct factorisation inside the block hands over to its engine.

    SuperLU, CHOLMOD (through its C interface) and Pardiso then spend seconds in compiled code that
    releases the GIL and keeps one core busy: the moment for other work on a second thread, which before
    it would contend with the numpy work that builds the system. Not called when no direct engine runs
    (multigrid); once at most, on the thread (context) that entered the block.
    """
    token = _ENGINE_STARTING.set(start)
    try:
        yield
    finally:
        _ENGINE_STARTING.reset(token)


def _engine_starting():
    """Hand the engine's start to whoever asked for it with :func:`when_engine_starts` (once)."""
    start = _ENGINE_STARTING.get()
    if start is not None:
        _ENGINE_STARTING.set(None)
        start()


def one_blas_thread():
    """A context in which the BLAS libraries loaded (OpenBLAS, MKL) run on one thread (threadpoolctl).

    SuperLU's solves with a block of right-hand sides call BLAS on one small supernode at a time, and the
    current sum one small matrix-vector product per block of edges. With the
    default of one BLAS thread per core, those threads wait for each other on every call, and when the
    cores are busy with other work the block of 19 solves of the 1000 x 1000 benchmark took 2 to 12 s
    instead of 1.0 to 1.4 s on one thread (docs/performance.md). Without threadpoolctl this does nothing.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:                 # pragma: no cover - threadpoolctl is a dependency
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


#: Environment variable that sets how many threads landflow's own parallel loops use (a whole number >= 1).
#: Batches and regional runs set it in their worker processes to the cores each worker gets.
THREADS_VARIABLE = "LANDFLOW_THREADS"


_WARNED_THREADS = set()


def compute_threads():
    """How many threads landflow's own parallel loops use (SuperLU's solves, the current sum).

    :data:`THREADS_VARIABLE` where it is set to a whole number >= 1, else the cores this process may run on.
    A value that is not such a number is ignored, with a warning naming it (once per value).
    """
    value = os.environ.get(THREADS_VARIABLE, "").strip()
    if value:
        if value.isdigit() and int(value) >= 1:
            return int(value)
        if value not in _WARNED_THREADS:            # once per value, not at every parallel loop
            _WARNED_THREADS.add(value)
            log.warning("%s=%r is not a whole number of threads >= 1; using the cores instead. Set it to 1, "
                        "2, ... or unset it.", THREADS_VARIABLE, value)
    return _cores()


def cores_per_worker(workers):
    """The threads each of ``workers`` processes sharing this machine's cores should use: at least 1."""
    return max(1, _cores() // max(1, int(workers)))


def _cores():
    """The cores this process may run on (at least 1)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:              # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


_SINGULAR = ("The system is singular: some part of the graph is not tied to a grounded node "
             "(an ungrounded Laplacian).")


#: Bytes of a direct factor per unknown and per doubling of the unknowns, on a 2-D grid in a
#: nested-dissection order (the factor holds O(n log n) numbers; George 1973). From the peaks measured
#: at 4 million unknowns (docs/performance.md): SuperLU 8.2 GB (L and U), Pardiso 6.5 GB; CHOLMOD from
#: its symbolic analysis in landflow's nested-dissection order (supernodal values and row indices:
#: 31.6 bytes at 1 million unknowns); rounded up so that the estimate errs on the safe side.
FACTOR_BYTES_PER_UNKNOWN_LOG2 = {"superlu": 100.0, "pardiso": 80.0, "cholmod": 36.0}

#: Share of the memory available after CHOLMOD's symbolic analysis that its numeric phase may take: the
#: factor, plus the copies of the matrix's triangle made during it when it goes through cvxopt (see
#: :func:`_cholmod_factor`). Above it, ``auto`` falls back to multigrid.
CHOLMOD_MEMORY_SHARE = 0.95

#: Bytes per stored entry of the triangle (a double and a 64-bit row index) in each of those copies.
_CHOLMOD_COPY_BYTES = 16


def factor_bytes(n_unknowns, engine):
    """Estimated memory of the direct factor of a grid system with ``n_unknowns`` (bytes).

    Examples
    --------
    >>> print(round(factor_bytes(4_000_000, "superlu") / 1e9, 1))
    8.8
    """
    n = max(int(n_unknowns), 2)
    return FACTOR_BYTES_PER_UNKNOWN_LOG2[engine] * n * np.log2(n)


def available_memory():
    """Bytes of memory available to this process now (Linux MemAvailable), or None where unknown."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        return None
    return None


def choose_method(n_unknowns, n_rhs=1, *, memory=None, engine=None):
    """The backend ``auto`` uses for a system of this size: ``"direct"`` or ``"multigrid"``.

    From the crossover table in docs/performance.md (2-core machine, 8-neighbour
    grids, log-normal resistance): a direct factorisation plus its cheap solves
    beats multigrid set-up plus one CG solve per right-hand side at up to
    :data:`DIRECT_ALWAYS_UNKNOWNS` unknowns even for one right-hand side; up to
    :data:`DIRECT_MAX_UNKNOWNS` once there are :data:`DIRECT_MIN_RHS` or more;
    above that bound SuperLU's and Pardiso's factors (n log n memory, n^1.5
    time) outgrow the machine and multigrid, linear in memory, takes over.
    CHOLMOD's supernodal factorisation of 16 million unknowns took less time
    than multigrid's set-up alone (docs/performance.md), so with ``engine``
    ``"cholmod"`` the size bound does not apply and memory alone decides.

    With ``memory`` (bytes available), a direct factorisation is chosen only
    when its estimated size (:func:`factor_bytes` for ``engine``, default the
    engine ``direct`` would use) fits in 70 % of it, leaving room for the
    graph, the potentials and the outputs; otherwise multigrid, whose memory
    grows linearly, and the reason is logged. For CHOLMOD this is only a first
    screen against all of the memory: its symbolic analysis gives the factor's
    exact size before the numeric phase, which :func:`factorize` checks, with the
    matrix copies of that phase, against :data:`CHOLMOD_MEMORY_SHARE` of what is
    then available.

    Examples
    --------
    >>> choose_method(1_000_000, 1, engine="superlu"), choose_method(4_000_000, 49, engine="superlu")
    ('direct', 'direct')
    >>> choose_method(4_000_000, 2, engine="superlu"), choose_method(16_000_000, 9, engine="superlu")
    ('multigrid', 'multigrid')
    >>> choose_method(16_000_000, 9, engine="cholmod"), choose_method(16_000_000, 9, memory=8e9, engine="cholmod")
    ('direct', 'multigrid')
    >>> choose_method(1_000_000, 19, memory=1e9, engine="superlu")
    'multigrid'
    """
    engine = engine or direct_engine()
    if engine == "cholmod":
        wanted = "direct"
    else:
        wanted = "direct" if n_unknowns <= DIRECT_ALWAYS_UNKNOWNS or (
            n_unknowns <= DIRECT_MAX_UNKNOWNS and n_rhs >= DIRECT_MIN_RHS) else "multigrid"
    if wanted == "direct" and memory is not None:
        need = factor_bytes(n_unknowns, engine)
        share = 1.0 if engine == "cholmod" else 0.7     # CHOLMOD's symbolic analysis checks again, exactly
        if need > share * memory:
            log.info("solver: multigrid instead of a direct factorisation: the %s factor of %d unknowns would "
                     "need about %.1f GB, more than %d%% of the %.1f GB available", engine, n_unknowns,
                     need / 1e9, round(100 * share), memory / 1e9)
            return "multigrid"
    return wanted


def direct_engine():
    """The engine method ``direct`` uses here: the first of :data:`DIRECT_ENGINES` that is installed.

    ``cholmod`` needs :mod:`cvxopt` and ``pardiso`` needs :mod:`pypardiso` (both in the optional
    ``fast`` extra); ``superlu`` comes with scipy. Only looks for the packages: importing them loads
    large libraries, which are left out of processes that do not use them.
    """
    for engine, package in (("cholmod", "cvxopt"), ("pardiso", "pypardiso")):
        if engine in DIRECT_ENGINES and importlib.util.find_spec(package) is not None:
            return engine
    return "superlu"


def _installed(engine):
    package = {"cholmod": "cvxopt", "pardiso": "pypardiso"}.get(engine)
    return package is None or importlib.util.find_spec(package) is not None


class Solver:
    """A prepared system ``A x = b``: call :meth:`solve` as often as needed.

    Attributes
    ----------
    method : str
        ``"direct"`` or ``"multigrid"``.
    engine : str
        ``"superlu"``, ``"cholmod"``, ``"pardiso"`` or ``"pyamg"``.
    n_unknowns : int
    matrix : sparse matrix or None
        The system, kept for the residual checks; None when ``factorize`` was given a ``product``.
    ordering : ndarray of int or None
        The permutation the engine's unknowns follow (SuperLU and CHOLMOD given an ordering other than
        the identity); the solves apply it and undo it.
    setup_seconds : float
    worst_residual : float
        The largest relative residual seen so far.
    iterations : list of int
        CG iterations per right-hand side (multigrid only).
    """

    def __init__(self, matrix, method, tolerance, *, engine=None, ordering=None, memory_share=None, product=None,
                 lower=None):
        self.matrix = matrix
        self.n_unknowns = int(matrix.shape[0] if matrix is not None else lower.shape[0])
        self.method = method
        self.engine = engine or ("pyamg" if method == "multigrid" else "superlu")
        self.tolerance = tolerance
        self.worst_residual = 0.0
        self.iterations = []
        self.n_solved = 0
        self.solve_seconds = 0.0
        self.ordering = None            # a permutation the engine's unknowns follow (None: the system's own order)
        self.factor_nonzeros = None
        self.factor_size = {}
        start = time.perf_counter()
        if ordering is not None and self.engine in ("superlu", "cholmod"):
            ordering = _check_ordering(ordering, self.n_unknowns)
            if not np.array_equal(ordering, np.arange(ordering.size)):
                self.ordering = ordering
        if self.engine == "superlu":
            if ordering is not None:
                permuted = _symmetric_csc(matrix if self.ordering is None else matrix[ordering][:, ordering])
                spec = "NATURAL"
            else:
                permuted, spec = _symmetric_csc(matrix), "MMD_AT_PLUS_A"
            _engine_starting()
            try:
                self._lu = sla.splu(permuted, permc_spec=spec,
                                    diag_pivot_thresh=0.0, options={"SymmetricMode": True})
            except RuntimeError as exc:  # singular: an ungrounded component
                raise SolverError(f"direct factorisation (superlu) failed: {exc}. {_SINGULAR}") from exc
            self.factor_nonzeros = int(self._lu.nnz)      # L and U together
            del permuted
        elif self.engine == "pardiso":
            _point_pypardiso_at_mkl()
            import pypardiso
            # pypardiso searches the file system for MKL on every new solver unless told where it is.
            os.environ.setdefault("PYPARDISO_MKL_RT", pypardiso.ps.libmkl._name)
            self._pardiso = pypardiso.PyPardisoSolver(mtype=2)  # real symmetric positive definite
            self._pardiso.set_statistical_info_off()
            self._upper = sp.triu(sp.csr_matrix(matrix), format="csr")
            self._upper.sort_indices()
            _engine_starting()
            try:
                self._pardiso.factorize(self._upper)
            except Exception as exc:  # pypardiso raises its own error class on a failed phase
                raise SolverError(f"direct factorisation (pardiso) failed: {exc}. {_SINGULAR}") from exc
        elif self.engine == "cholmod":
            if lower is None:
                lower = _lower_csc(matrix, self.ordering)
            self._factor, self.factor_size = _cholmod_factor(lower, ordered=ordering is not None,
                                                             memory_share=memory_share)
            del lower
            self.factor_nonzeros = self.factor_size.get("nonzeros")
        else:
            self._ml = _multigrid_hierarchy(matrix.tocsr())
        self.setup_seconds = time.perf_counter() - start
        self._product = product
        if product is not None and self.engine != "pyamg":
            self.matrix = None          # the factor holds what the solves need; the residuals use product

    def __repr__(self):
        return (f"Solver(method={self.method!r}, unknowns={self.n_unknowns}, "
                f"solved={self.n_solved}, worst_residual={self.worst_residual:.2e})")

    def solve(self, b, *, check=True):
        """Solve for one right-hand side (n,) or several (n, m); returns float64 of b's shape.

        With ``check`` (the default) each column's residual is checked at once (:meth:`check`). A caller
        that holds the right-hand sides can pass ``check=False`` and call :meth:`check` itself later, for
        example once the factor is released and the memory it took is free for the check's products.
        """
        if getattr(self, "_released", False):
            raise SolverError(f"this {self.method} solver was released after its solves (Solver.release); "
                              "factorise the system again to solve more right-hand sides.")
        b = np.asarray(b, dtype=np.float64)
        start = time.perf_counter()
        if self.engine in ("superlu", "cholmod"):
            if self.ordering is None:
                x = self._direct_solve(b)
            else:
                x = np.empty_like(b)
                x[self.ordering] = self._direct_solve(b[self.ordering])
        elif self.engine == "pardiso":
            x = np.asarray(self._pardiso.solve(self._upper, b)).reshape(b.shape)
        else:
            x = np.column_stack([self._cg(col) for col in b.reshape(b.shape[0], -1).T]).reshape(b.shape)
        self.n_solved += 1 if b.ndim == 1 else b.shape[1]
        self.solve_seconds += time.perf_counter() - start
        if check:
            self.check(x, b)
        return x

    def check(self, x, b):
        """Check the solution ``x`` of right-hand sides ``b`` column by column; raise past the limit.

        The limit is ``max(tolerance, 1e-6)`` for direct engines and ``10 * tolerance`` for multigrid
        (CG stops on a preconditioned norm). The worst residual is kept for the manifest.
        """
        start = time.perf_counter()
        residual = _relative_residual(self._product or self.matrix, x, np.asarray(b, dtype=np.float64))
        self.accept_residual(residual, seconds=time.perf_counter() - start)

    def accept_residual(self, residual, *, seconds=0.0):
        """Keep a relative residual computed by the caller (the worst of several columns) and judge it.

        For callers that can compute ``||b - A x|| / ||b||`` more cheaply than :meth:`check` in a space of
        their own (patch voltages: on the graph's nodes, from the potentials as stored). ``seconds`` is
        the time that took, added to the solve time. Raises :class:`SolverError` past the limit of
        :meth:`check`.
        """
        direct = self.method == "direct"
        limit = max(DIRECT_RESIDUAL_LIMIT, self.tolerance) if direct else self.tolerance * 10
        residual = float(residual)
        self.worst_residual = max(self.worst_residual, residual)
        self.solve_seconds += seconds
        if not residual <= limit:
            fix = ("The system is singular or nearly so (an ungrounded part of the graph?)." if direct
                   else "Try solver method 'direct' or a looser tolerance.")
            raise SolverError(
                f"{self.method} solve reached relative residual {residual:.2e}, above {limit:.0e}. {fix}",
                residual=residual,
                iterations=self.iterations[-1] if self.iterations else None)

    def _direct_solve(self, b):
        """SuperLU's solve of b, its columns shared among the cores (:func:`_solve_in_parts`), or CHOLMOD's."""
        if self.engine == "superlu":
            def solve(part, out):
                out[...] = self._lu.solve(part)
            with one_blas_thread():
                return _solve_in_parts(solve, b)
        library = _CholmodLibrary.load()
        if library is None:
            return _cholmod_solve(self._factor, b)
        # One call for the block: CHOLMOD's solves gained nothing on two threads (measured), and the
        # single-threaded OpenBLAS that cvxopt ships it with is not meant to be called from several at once.
        return library.solve(self._factor, b.reshape(b.shape[0], -1)).reshape(b.shape)

    def _cg(self, b):
        residuals = []
        x = self._ml.solve(b, tol=self.tolerance, accel="cg", maxiter=500, residuals=residuals)
        self.iterations.append(len(residuals) - 1)
        return x

    def release(self):
        """Free the factor or multigrid hierarchy; :meth:`record` still works, :meth:`solve` no longer does."""
        if getattr(self, "_pardiso", None) is not None:
            self._pardiso.free_memory(everything=True)
        self._lu = self._ml = self._pardiso = self._upper = self._factor = None
        self._released = True

    def record(self):
        """A JSON-ready summary for the manifest."""
        out = {"method": self.method, "engine": self.engine, "unknowns": self.n_unknowns,
               "right_hand_sides": self.n_solved, "worst_relative_residual": float(self.worst_residual),
               "setup_seconds": round(self.setup_seconds, 3), "solve_seconds": round(self.solve_seconds, 3)}
        if self.iterations:
            out["cg_iterations_max"] = int(max(self.iterations))
        if self.factor_nonzeros is not None:
            out["factor_nonzeros"] = self.factor_nonzeros
        for key in ("bytes", "ordering", "supernodes"):
            if key in self.factor_size:
                out[f"factor_{key}"] = self.factor_size[key]
        return out


class _FactorTooLarge(SolverError):
    """CHOLMOD's symbolic analysis found a factor larger than the memory allowed for it."""


def _cvxopt_lower(lower):
    """The lower triangle (scipy CSC, sorted) as the cvxopt sparse matrix CHOLMOD's cvxopt interface reads."""
    from cvxopt import matrix as dense, spmatrix

    columns = np.repeat(np.arange(lower.shape[1], dtype=np.int64), np.diff(lower.indptr))
    system = spmatrix(dense(lower.data), dense(lower.indices.astype(np.int64)), dense(columns), lower.shape)
    del columns
    return system


def _full_from_lower(lower, ordering=None):
    """The whole symmetric scipy matrix back from its lower triangle (for a fall-back), in the caller's order.

    ``ordering`` is the permutation the triangle was taken in (:func:`_lower_csc`), undone here.
    """
    full = sp.csr_array(lower + lower.T - sp.diags_array(lower.diagonal()))
    if ordering is None:
        return full
    inverse = np.empty_like(ordering)
    inverse[ordering] = np.arange(ordering.size)
    return full[inverse][:, inverse]


def _cholmod_factor(lower, *, ordered=False, memory_share=None):
    """CHOLMOD's supernodal Cholesky factor of an SPD matrix, given its lower triangle.

    ``lower`` is the lower triangle from :func:`_lower_csc` or :func:`grounded_lower`. With ``ordered`` its
    unknowns are already in a fill-reducing order (landflow's nested dissection), which CHOLMOD keeps as it
    is; otherwise CHOLMOD orders them itself (AMD). Returns the factor (a :class:`_Factor`, or where
    CHOLMOD's C interface cannot be reached a cvxopt capsule) and its size from the symbolic analysis
    (:func:`_cholmod_size`). With ``memory_share``, a factor needing more than that share of the memory
    available after the symbolic analysis raises :class:`_FactorTooLarge` before the numeric phase
    allocates it. Chen, Davis, Hager & Rajamanickam 2008, "Algorithm 887: CHOLMOD, supernodal sparse
    Cholesky factorization and update/downdate", ACM TOMS 35:22, doi:10.1145/1391989.1391995.

    Memory and time. Where CHOLMOD's C interface can be reached (:class:`_CholmodLibrary`), both phases
    run on ``lower``'s own arrays: an ordered system is analysed in CHOLMOD's natural order without
    postordering (the nested-dissection order is a postorder of its elimination tree already: the same
    nonzeros, measured), so that neither phase copies, permutes or transposes the matrix. Otherwise both
    go through cvxopt, which packs copies of the triangle, and CHOLMOD, given an order other than the
    natural one, makes two permuted transposes of it (16 bytes per entry each: 2.6 GB at 16 million
    unknowns, beside a 12 GB factor); there an ordered system is analysed with the identity permutation
    and its factor marked as natural (:func:`_cholmod_mark_natural`) to spare the transposes.
    """
    n = lower.shape[0]
    library = _CholmodLibrary.load()
    _engine_starting()
    if library is not None:
        factor = library.analyze(lower, natural=ordered)
        size = _cholmod_size(factor, n)
        if ordered and size:
            size["ordering"] = "given"              # landflow's, which CHOLMOD keeps as it is
        copies = 0
    else:
        factor, system, size, natural = _cvxopt_symbolic(lower, ordered)
        copies = 1 if natural else 2                 # cvxopt packs a copy; CHOLMOD transposes unless natural
    if memory_share is not None and "bytes" in size:
        free = available_memory()
        need = size["bytes"] + _CHOLMOD_COPY_BYTES * copies * lower.nnz
        if free is not None and need > memory_share * free:
            raise _FactorTooLarge(f"the CHOLMOD factor of {n} unknowns needs {size['bytes'] / 1e9:.1f} GB "
                                  f"and its numeric phase {need / 1e9:.1f} GB, more than {round(100 * memory_share)}% "
                                  f"of the {free / 1e9:.1f} GB available")
    if library is not None:
        minor = library.factorize(lower, factor)
    else:
        from cvxopt import cholmod

        try:
            cholmod.numeric(system, factor)
            minor = n
        except ArithmeticError as exc:              # not positive definite: a pivot <= 0
            minor = exc.args[0] if exc.args else 0
    if minor < n:
        raise SolverError(f"direct factorisation (cholmod) failed: the matrix is not positive definite "
                          f"(pivot {minor}). {_SINGULAR}")
    return factor, size


def _cvxopt_symbolic(lower, ordered):
    """CHOLMOD's symbolic analysis through cvxopt: (factor capsule, cvxopt's triangle, size, natural).

    With ``ordered`` the identity permutation is given, without postordering, and the factor is then
    marked as natural (:func:`_cholmod_mark_natural`; ``natural`` says whether that was done).
    """
    from cvxopt import cholmod, matrix as dense

    n = lower.shape[0]
    system = _cvxopt_lower(lower)
    saved = dict(cholmod.options)
    try:
        if ordered:
            cholmod.options["nmethods"] = 1          # the given order only, without also trying AMD
            cholmod.options["postorder"] = False     # ... and kept as it is
            factor = cholmod.symbolic(system, p=dense(np.arange(n, dtype=np.int64), tc="i"))
        else:
            factor = cholmod.symbolic(system)
    finally:
        cholmod.options.clear()
        cholmod.options.update(saved)
    size = _cholmod_size(factor, n)
    return factor, system, size, ordered and _cholmod_mark_natural(factor, n)


class _Factor:
    """A ``cholmod_factor`` made by :meth:`_CholmodLibrary.analyze`, freed with it when this object goes."""

    def __init__(self, library, address):
        import weakref

        self.address = address
        weakref.finalize(self, library.free_factor, address)


def grounded_lower(adjacency, diagonal, nodes):
    """The lower triangle of ``L[nodes][:, nodes]`` with ``L = diag(diagonal) - adjacency``, in ``nodes``' order.

    For CHOLMOD (:func:`factorize`'s ``lower``): :func:`grounded_matrix` with ``lower=True``.
    """
    return grounded_matrix(adjacency, diagonal, nodes, lower=True)


def grounded_matrix(adjacency, diagonal, nodes, *, lower=False):
    """``L[nodes][:, nodes]`` with ``L = diag(diagonal) - adjacency``, in ``nodes``' order, or its lower triangle.

    Straight from a graph: ``adjacency`` is its symmetric CSR conductance matrix (no self-loops),
    ``diagonal`` its total conductance per node, and ``nodes`` the unknowns, in elimination order for a
    direct engine (every other node is grounded). Unknown j is node ``nodes[j]``. Row j of the grounded
    matrix is row ``nodes[j]`` of the Laplacian at the unknowns, and (the matrix being symmetric) column j
    of its lower triangle holds the same entries at unknowns after j, so one row gather of ``adjacency``
    gives either: the Laplacian, its grounded submatrix and their permuted copies are never formed. The
    whole matrix comes as CSR (which SuperLU reads as CSC, the matrix being symmetric), the triangle as CSC
    with 64-bit indices, as CHOLMOD's long-integer interface reads them in place; indices sorted.
    """
    nodes = np.asarray(nodes, dtype=np.int64)
    n = nodes.size
    position = np.full(adjacency.shape[0], -1, dtype=np.int64)     # -1: grounded
    position[nodes] = np.arange(n)
    index_type = np.int64 if lower else adjacency.indices.dtype
    # Bands of unknowns (columns of the result) are made on one thread per core: numpy's gathers, masks
    # and sums release the GIL. Each band is the whole-matrix algorithm on its columns, written into its
    # own slice of the result, so the result does not depend on the bands (tested).
    count = max(1, min(compute_threads(), adjacency.nnz // GROUNDED_BAND_MIN_ENTRIES))
    bounds = np.linspace(0, n, count + 1).astype(np.int64)

    def select(lo, hi):
        """The band's rows, their entries' unknowns, which entries are kept, and the band's own indptr."""
        rows = adjacency[nodes[lo:hi]]                              # row j is node nodes[j]
        columns = position[rows.indices]
        if lower:
            kept = columns > np.repeat(np.arange(lo, hi, dtype=np.int64), np.diff(rows.indptr))
        else:
            kept = columns >= 0
        before = np.zeros(rows.nnz + 1, dtype=np.int64)
        np.cumsum(kept, out=before[1:])
        local = np.arange(hi - lo + 1, dtype=np.int64)              # one diagonal entry per column ...
        local += before[rows.indptr]                                # ... and the kept entries before it
        return [rows, columns, kept, local]        # a list: fill empties it, so each band's arrays go with it

    bands = on_threads(select, bounds[:-1], bounds[1:])
    indptr = np.empty(n + 1, dtype=np.int64)
    indptr[0] = 0
    for lo, hi, (_, _, _, local) in zip(bounds[:-1], bounds[1:], bands):
        indptr[lo + 1:hi + 1] = local[1:] + indptr[lo]
    indices = np.empty(indptr[-1], dtype=index_type)
    data = np.empty(indptr[-1], dtype=np.float64)

    def fill(lo, hi, band):
        rows, columns, kept, local = band
        first, last = indptr[lo], indptr[hi]
        out_indices, out_data = indices[first:last], data[first:last]
        off = np.ones(last - first, dtype=bool)
        off[local[:-1]] = False
        out_indices[local[:-1]] = np.arange(lo, hi)
        out_data[local[:-1]] = diagonal[nodes[lo:hi]]
        out_indices[off] = columns[kept]
        out_data[off] = rows.data[kept]
        np.negative(out_data, out=out_data, where=off)
        band.clear()
        # each column's entries sorted (rows for the whole matrix, CSR); scipy may or may not copy the
        # slices into the matrix it sorts, so the sorted arrays are written back either way
        view = (sp.csc_array if lower else sp.csr_array)((out_data, out_indices, local),
                                                         shape=(n, hi - lo) if lower else (hi - lo, n))
        view.sort_indices()
        out_indices[...], out_data[...] = view.indices, view.data

    on_threads(fill, bounds[:-1], bounds[1:], bands)
    del bands, position
    if not lower:
        indptr = indptr.astype(indices.dtype)
    matrix = (sp.csc_array if lower else sp.csr_array)((data, indices, indptr), shape=(n, n))
    matrix.has_sorted_indices = True
    return matrix


#: Below this many stored entries of the graph, :func:`grounded_matrix` makes its system on one thread.
GROUNDED_BAND_MIN_ENTRIES = 1 << 20


def on_threads(function, *arguments):
    """``[function(*a) for a in zip(*arguments)]``, each call on a thread of its own (none for a single call).

    landflow's parallel loops (SuperLU's solves, the grounded system, the residual checks, the current sum)
    share their work into one call per thread with this; the calls must release the GIL to gain.
    """
    calls = list(zip(*arguments))
    if len(calls) < 2:
        return [function(*call) for call in calls]
    from concurrent.futures import ThreadPoolExecutor
    with ThreadPoolExecutor(len(calls)) as pool:
        return list(pool.map(lambda call: function(*call), calls))


def _lower_csc(matrix, ordering=None):
    """The lower triangle of a symmetric CSR matrix (``ordering``: of ``matrix[ordering][:, ordering]``).

    CSC with sorted indices and 64-bit index arrays, as CHOLMOD's long-integer interface reads them in
    place. Column j of the lower triangle is row j's entries at columns >= j (the matrix is symmetric),
    so one row gather, the columns renumbered, gives it: no transposed or permuted copy of the whole
    matrix is made.
    """
    n = matrix.shape[0]
    if ordering is None:
        columns = matrix.indices.astype(np.int64)
    else:
        matrix = matrix[ordering]                   # row j is row ordering[j]
        inverse = np.empty(n, dtype=np.int64)
        inverse[ordering] = np.arange(n)
        columns = inverse[matrix.indices]
    rows = np.repeat(np.arange(n, dtype=np.int64), np.diff(matrix.indptr))
    keep = columns >= rows
    del rows
    indptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(np.add.reduceat(keep, matrix.indptr[:-1]) if matrix.nnz else np.zeros(n, np.int64), out=indptr[1:])
    lower = sp.csc_array((matrix.data[keep], columns[keep], indptr), shape=(n, n))
    del keep, columns, matrix
    lower.sort_indices()
    return lower


#: Right-hand sides CHOLMOD solves at once as a sparse block (its supernodal solve works on blocks of
#: columns with matrix-matrix products; cvxopt's dense solve goes one column at a time).
_CHOLMOD_SPARSE_RHS = 0.01


def _cholmod_solve(factor, b):
    """x = A^-1 b with CHOLMOD's factor; b of shape (n,) or (n, m), float64. Returns x of b's shape.

    Unit-current right-hand sides are sparse, and CHOLMOD's sparse solve (cholmod_spsolve) handles the
    block's columns together, where cvxopt's dense solve loops over them one by one: about twice as fast
    for 19 columns at a million unknowns. Dense right-hand sides use the dense solve.
    """
    from cvxopt import cholmod, matrix as dense, spmatrix

    b2 = b.reshape(b.shape[0], -1)
    n, m = b2.shape
    rows, cols = np.nonzero(b2)
    if m == 1 or rows.size > _CHOLMOD_SPARSE_RHS * n * m:     # one column or dense: solved in place
        x = dense(np.asfortranarray(b2))
        cholmod.solve(factor, x)
        return np.asarray(x).reshape(b.shape)
    block = spmatrix(dense(b2[rows, cols]), dense(rows.astype(np.int64)), dense(cols.astype(np.int64)), (n, m))
    solution = cholmod.spsolve(factor, block)
    del block
    x = np.asarray(dense(solution))     # cvxopt's own sparse-to-dense, column-major; numpy reads it in place
    del solution
    return x.reshape(b.shape)


def _factor_struct(factor, n):
    """The address of the ``cholmod_factor`` a :class:`_Factor` or a cvxopt capsule holds, and its index type.

    cvxopt gives no access to the factor's fields, so they are read with ctypes. Their leading fields
    have kept their layout since CHOLMOD 1.0: n, minor, Perm, ColCount, IPerm, nzmax, p, i, x, z, nz,
    next, prev, nsuper, ssize, xsize, maxcsize, maxesize, super, pi, px, s (sizes and pointers), then the
    ints ordering, is_ll, is_super, is_monotonic, itype. None when the structure does not look as
    expected (another CHOLMOD build), so that nothing is read or changed on a guess.
    """
    import ctypes

    if isinstance(factor, _Factor):
        address = factor.address
    else:
        try:
            name = ctypes.pythonapi.PyCapsule_GetName
            name.restype, name.argtypes = ctypes.c_char_p, [ctypes.py_object]
            pointer = ctypes.pythonapi.PyCapsule_GetPointer
            pointer.restype, pointer.argtypes = ctypes.c_void_p, [ctypes.py_object, ctypes.c_char_p]
            address = pointer(factor, name(factor))
        except (AttributeError, ValueError, TypeError, OSError):
            return None
    size_t = ctypes.sizeof(ctypes.c_size_t)
    flags = (ctypes.c_int * 5).from_address(address + 22 * size_t)
    is_super, itype = flags[2], flags[4]
    if (ctypes.c_size_t.from_address(address).value != n or itype not in (0, 2) or is_super not in (0, 1)
            or not ctypes.c_void_p.from_address(address + 3 * size_t).value):
        return None
    return address, (np.int64 if itype == 2 else np.int32)      # CHOLMOD_LONG or CHOLMOD_INT


def _factor_array(address, field, n, integer):
    """The factor's integer array of length n whose pointer is leading field ``field`` (2: Perm, 3: ColCount)."""
    import ctypes

    pointer = ctypes.c_void_p.from_address(address + field * ctypes.sizeof(ctypes.c_size_t)).value
    if not pointer:
        return None
    return np.ctypeslib.as_array((np.ctypeslib.as_ctypes_type(integer) * n).from_address(pointer))


def _cholmod_size(factor, n):
    """The size of a CHOLMOD factor from its symbolic analysis, read from CHOLMOD's factor structure.

    Returns ``nonzeros`` (nonzeros of L, the sum of its column counts), ``bytes`` (supernodal values
    and row indices: 8 (xsize + ssize)), ``supernodes`` and ``ordering``; an empty dict when the
    structure does not look as expected (:func:`_factor_struct`), so nothing wrong is ever recorded.
    """
    import ctypes

    found = _factor_struct(factor, n)
    if found is None:
        return {}
    address, integer = found
    nonzeros = int(_factor_array(address, 3, n, integer).sum())
    if not n <= nonzeros <= n * (n + 1) // 2:
        return {}
    sizes = (ctypes.c_size_t * 18).from_address(address)
    ordering, is_super = (ctypes.c_int * 3).from_address(address + 22 * ctypes.sizeof(ctypes.c_size_t))[::2]
    out = {"nonzeros": nonzeros,
           "ordering": {0: "natural", 1: "given", 2: "amd", 3: "metis", 4: "nesdis", 5: "colamd",
                        6: "postordered"}.get(ordering, str(ordering))}
    if is_super:
        nsuper, ssize, xsize = sizes[13], sizes[14], sizes[15]
        if nonzeros <= xsize <= 64 * nonzeros and 0 < nsuper <= n:
            out["bytes"] = int(8 * (xsize + ssize))
            out["supernodes"] = int(nsuper)
    return out


def _cholmod_mark_natural(factor, n):
    """Mark a symbolic factor whose permutation is the identity as being in natural order; True if done.

    CHOLMOD's numeric phase permutes and transposes the matrix twice unless the factor's ordering is the
    natural one, even when the permutation it was given is the identity; with the mark it reads the
    lower triangle as it is. The permutation is checked to be the identity first, entry by entry, so the
    mark never changes what is factorised (cholmod_factorize.c, "S = A" for the natural ordering).
    """
    import ctypes

    found = _factor_struct(factor, n)
    if found is None:
        return False
    address, integer = found
    ordering = ctypes.c_int.from_address(address + 22 * ctypes.sizeof(ctypes.c_size_t))
    perm = _factor_array(address, 2, n, integer)
    if ordering.value != 1 or perm is None or not np.array_equal(perm, np.arange(n, dtype=integer)):
        return False        # not "given", or not the identity
    ordering.value = 0      # CHOLMOD_NATURAL
    return True


class _CholmodLibrary:
    """CHOLMOD's own C functions, from the library cvxopt's extension loads, called with ctypes.

    cvxopt's symbolic and numeric phases copy the matrix into triangles of their own; calling
    ``cholmod_l_analyze`` and ``cholmod_l_factorize`` directly on a ``cholmod_sparse`` whose arrays are
    numpy's spares those copies (1.3 GB each at 16 million unknowns, and 0.4 s of the 1 s symbolic phase
    at 1 million). Only the structures whose layout CHOLMOD has kept since version 1.0 are read or
    filled: ``cholmod_sparse`` is filled here, the ``cholmod_factor`` made by ``cholmod_l_analyze`` is read
    for its size and freed by :class:`_Factor`, and a ``cholmod_common`` is started by ``cholmod_l_start``
    in a buffer larger than the structure. Every field of it that is set (the print level, the ordering
    methods, postordering) and its neighbours are checked against CHOLMOD's documented defaults first
    (:meth:`_defaults_as_expected`); any mismatch, a missing library or a missing function and
    :meth:`load` returns None, so that cvxopt's own phases are used instead.
    """

    _COMMON_BYTES = 1 << 16             # more than sizeof(cholmod_common) in CHOLMOD 3 to 5 (about 2.3 kB)
    _PRINT_OFFSET = 144                 # Common->print, after the fields checked in _defaults_as_expected
    _SUPERNODAL_OFFSET = 48             # Common->supernodal, the first of the ints checked in _defaults_as_expected
    _NMETHODS_OFFSET = 168              # Common->nmethods, then current, selected and method[0 .. 9]
    _METHOD_OFFSET, _METHOD_BYTES = 184, 168
    _ORDERING_IN_METHOD = 132           # method[i].ordering, the last of its six ints
    _POSTORDER_OFFSET = 184 + 10 * 168  # Common->postorder, after the ten methods
    _instance = False                   # not looked for yet

    def __init__(self, lib):
        import ctypes

        self._lib = lib
        for name in ("cholmod_l_start", "cholmod_l_finish", "cholmod_l_factorize", "cholmod_l_free_dense",
                     "cholmod_l_free_factor"):
            getattr(lib, name).restype = ctypes.c_int
        lib.cholmod_l_start.argtypes = lib.cholmod_l_finish.argtypes = [ctypes.c_void_p]
        lib.cholmod_l_factorize.argtypes = [ctypes.c_void_p, ctypes.c_void_p, ctypes.c_void_p]
        lib.cholmod_l_analyze.restype = ctypes.c_void_p
        lib.cholmod_l_analyze.argtypes = [ctypes.c_void_p, ctypes.c_void_p]
        lib.cholmod_l_free_factor.argtypes = [ctypes.c_void_p, ctypes.c_void_p]
        lib.cholmod_l_solve.restype = ctypes.c_void_p
        lib.cholmod_l_solve.argtypes = [ctypes.c_int, ctypes.c_void_p, ctypes.c_void_p, ctypes.c_void_p]
        lib.cholmod_l_free_dense.argtypes = [ctypes.c_void_p, ctypes.c_void_p]

        class Dense(ctypes.Structure):                  # cholmod_dense
            _fields_ = [("nrow", ctypes.c_size_t), ("ncol", ctypes.c_size_t), ("nzmax", ctypes.c_size_t),
                        ("d", ctypes.c_size_t), ("x", ctypes.c_void_p), ("z", ctypes.c_void_p),
                        ("xtype", ctypes.c_int), ("dtype", ctypes.c_int)]
        self._dense = Dense

        class Sparse(ctypes.Structure):                 # cholmod_sparse
            _fields_ = [("nrow", ctypes.c_size_t), ("ncol", ctypes.c_size_t), ("nzmax", ctypes.c_size_t),
                        ("p", ctypes.c_void_p), ("i", ctypes.c_void_p), ("nz", ctypes.c_void_p),
                        ("x", ctypes.c_void_p), ("z", ctypes.c_void_p), ("stype", ctypes.c_int),
                        ("itype", ctypes.c_int), ("xtype", ctypes.c_int), ("dtype", ctypes.c_int),
                        ("sorted", ctypes.c_int), ("packed", ctypes.c_int)]
        self._sparse = Sparse

    @classmethod
    def load(cls):
        """The library, or None where it cannot be found or does not look as expected (looked for once)."""
        if cls._instance is False:
            cls._instance = cls._find()
        return cls._instance

    @classmethod
    def _find(cls):
        import ctypes
        import ctypes.util

        import cvxopt
        import cvxopt.cholmod  # noqa: F401  (loads the library)

        candidates = []
        try:                                    # Linux: the very file the extension loaded
            with open("/proc/self/maps", encoding="utf-8", errors="replace") as fh:
                candidates += sorted({line.split()[-1] for line in fh if "libcholmod" in line})
        except OSError:
            pass
        package = Path(cvxopt.__file__).parent
        for folder in (package.parent / "cvxopt.libs", package / ".dylibs", package):
            candidates += sorted(str(p) for p in folder.glob("*cholmod*") if p.suffix in (".so", ".dylib", ".dll")
                                 or ".so." in p.name)
        candidates += [found for found in [ctypes.util.find_library("cholmod")] if found]
        for candidate in candidates:
            try:
                lib = ctypes.CDLL(candidate)
                library = cls(lib)
            except (OSError, AttributeError):
                continue
            if library._defaults_as_expected():
                return library
        log.debug("solver: CHOLMOD's C interface not found beside cvxopt; its numeric phase goes through cvxopt")
        return None

    def _start(self):
        import ctypes

        common = ctypes.create_string_buffer(self._COMMON_BYTES)
        if not self._lib.cholmod_l_start(common):
            raise OSError("cholmod_l_start failed")
        return common

    def _defaults_as_expected(self):
        """Whether a started Common holds CHOLMOD's defaults where this class expects them.

        Checked: the growth and supernodal settings, the print level, the number of ordering methods, the
        orderings of the first five methods (given, AMD, METIS, nested dissection, natural) with two of
        the first method's parameters, and postordering: each field this class reads or sets, and its
        neighbours, at the offset CHOLMOD 3 to 5 put it.
        """
        try:
            common = self._start()
        except OSError:
            return False
        raw = bytes(common)
        doubles = np.frombuffer(raw, np.float64, 6)             # dbound grow0 grow1 grow2 maxrank switch
        sizes = np.frombuffer(raw, np.uint64, 2, 24)
        ints = np.frombuffer(raw, np.int32, 7, 48)              # supernodal, final_asis ... final_resymbol
        relax = np.frombuffer(raw, np.float64, 3, 80), np.frombuffer(raw, np.uint64, 3, 104)
        expected = (doubles[[0, 1, 2, 5]].tolist() == [0.0, 1.2, 1.2, 40.0] and sizes.tolist() == [5, 8]
                    and ints.tolist() == [1, 1, 1, 0, 1, 1, 0] and relax[0].tolist() == [0.8, 0.1, 0.05]
                    and relax[1].tolist() == [4, 16, 48]
                    and np.frombuffer(raw, np.int32, 1, self._PRINT_OFFSET)[0] == 3
                    and np.frombuffer(raw, np.int32, 1, self._NMETHODS_OFFSET)[0] == 0
                    and [np.frombuffer(raw, np.int32, 1, self._METHOD_OFFSET + m * self._METHOD_BYTES
                                       + self._ORDERING_IN_METHOD)[0] for m in range(5)] == [1, 2, 3, 4, 0]
                    and np.frombuffer(raw, np.float64, 1, self._METHOD_OFFSET + 16)[0] == 10.0     # prune_dense
                    and np.frombuffer(raw, np.uint64, 1, self._METHOD_OFFSET + 72)[0] == 200       # nd_small
                    and np.frombuffer(raw, np.int32, 1, self._POSTORDER_OFFSET)[0] == 1)
        self._lib.cholmod_l_finish(common)
        return expected

    def _sparse_of(self, lower):
        """A ``cholmod_sparse`` lower triangle (CHOLMOD_LONG, real) on ``lower``'s arrays, and those arrays."""
        n = lower.shape[0]
        arrays = [np.ascontiguousarray(a, dtype=t) for a, t in
                  ((lower.indptr, np.int64), (lower.indices, np.int64), (lower.data, np.float64))]
        indptr, indices, data = arrays
        matrix = self._sparse(nrow=n, ncol=n, nzmax=data.size, p=indptr.ctypes.data, i=indices.ctypes.data,
                              nz=None, x=data.ctypes.data, z=None, stype=-1, itype=2, xtype=1, dtype=0,
                              sorted=1, packed=1)
        return matrix, arrays

    def analyze(self, lower, *, natural):
        """CHOLMOD's symbolic analysis of ``lower`` (on its own arrays): a :class:`_Factor`.

        With ``natural``, the unknowns' own order without postordering (the caller's fill-reducing
        order); otherwise CHOLMOD's default choice of ordering.
        """
        import ctypes

        matrix, arrays = self._sparse_of(lower)
        common = self._start()
        base = ctypes.addressof(common)
        ctypes.c_int.from_address(base + self._PRINT_OFFSET).value = 0
        # supernodal whatever the size, as cvxopt asks too: a simplicial factor of a small system would be
        # LDL', which factorises a matrix that is not positive definite without complaint
        ctypes.c_int.from_address(base + self._SUPERNODAL_OFFSET).value = 2      # CHOLMOD_SUPERNODAL
        if natural:
            ctypes.c_int.from_address(base + self._NMETHODS_OFFSET).value = 1
            ctypes.c_int.from_address(base + self._METHOD_OFFSET + self._ORDERING_IN_METHOD).value = 0  # NATURAL
            ctypes.c_int.from_address(base + self._POSTORDER_OFFSET).value = 0
        try:
            address = self._lib.cholmod_l_analyze(ctypes.byref(matrix), common)
        finally:
            self._lib.cholmod_l_finish(common)
        del arrays
        if not address:
            raise SolverError("direct factorisation (cholmod) failed: CHOLMOD's symbolic analysis ran out of "
                              "memory; use solver method 'multigrid' for a system this large.")
        return _Factor(self, address)

    def free_factor(self, address):
        """Free a ``cholmod_factor`` made by :meth:`analyze`."""
        import ctypes

        common = self._start()
        try:
            self._lib.cholmod_l_free_factor(ctypes.byref(ctypes.c_void_p(address)), common)
        finally:
            self._lib.cholmod_l_finish(common)

    def factorize(self, lower, factor):
        """The numeric phase into ``factor`` (a symbolic factor) from ``lower``'s own arrays.

        Returns CHOLMOD's ``minor``: n when the matrix is positive definite, else the failing column.
        """
        import ctypes

        n = lower.shape[0]
        found = _factor_struct(factor, n)
        if found is None or found[1] is not np.int64:
            raise SolverError("direct factorisation (cholmod): the symbolic factor is not CHOLMOD's "
                              "long-integer kind that landflow expects; use solver method 'superlu'.")
        address = found[0]
        matrix, arrays = self._sparse_of(lower)
        common = self._start()
        ctypes.c_int.from_address(ctypes.addressof(common) + self._PRINT_OFFSET).value = 0
        try:
            ok = self._lib.cholmod_l_factorize(ctypes.byref(matrix), address, common)
        finally:
            self._lib.cholmod_l_finish(common)
        if not ok:
            raise SolverError("direct factorisation (cholmod) failed: CHOLMOD ran out of memory or refused "
                              "the matrix; use solver method 'multigrid' for a system this large.")
        return int(ctypes.c_size_t.from_address(address + ctypes.sizeof(ctypes.c_size_t)).value)

    def solve(self, factor, b):
        """x = A^-1 b for a block of columns b (n, m), with one call of ``cholmod_l_solve``.

        CHOLMOD solves the columns together (supernodal block solves with matrix-matrix products), where
        cvxopt's dense solve goes one column at a time and its sparse solve in blocks of four.
        """
        import ctypes

        n, m = b.shape
        found = _factor_struct(factor, n)
        if found is None:
            raise SolverError("direct solve (cholmod): the factor does not look as expected; "
                              "use solver method 'superlu'.")
        rhs = np.asfortranarray(b, dtype=np.float64)
        out = np.empty((n, m), order="F")
        block = self._dense(nrow=n, ncol=m, nzmax=n * m, d=n, x=rhs.ctypes.data, z=None, xtype=1, dtype=0)
        common = self._start()
        ctypes.c_int.from_address(ctypes.addressof(common) + self._PRINT_OFFSET).value = 0
        try:
            solution = self._lib.cholmod_l_solve(0, found[0], ctypes.byref(block), common)   # CHOLMOD_A
            if not solution:
                raise SolverError("direct solve (cholmod) failed: CHOLMOD ran out of memory; "
                                  "solve fewer right-hand sides at once or use solver method 'multigrid'.")
            try:
                result = self._dense.from_address(solution)
                if (result.nrow, result.ncol, result.d) != (n, m, n):
                    raise SolverError("direct solve (cholmod): CHOLMOD returned a block of another shape.")
                out[...] = np.ctypeslib.as_array((ctypes.c_double * (n * m)).from_address(result.x)).reshape(
                    (n, m), order="F")
            finally:
                handle = ctypes.c_void_p(solution)
                self._lib.cholmod_l_free_dense(ctypes.byref(handle), common)
        finally:
            self._lib.cholmod_l_finish(common)
        return out


#: Columns of a part in :func:`_solve_in_parts` start at multiples of this: BLAS kernels work on a few
#: columns at a time (OpenBLAS: 2, 4 or 8) and round the last few of a block in their own way, so parts
#: that start on such a boundary give every column what the whole block gives, to the last bit.
PART_COLUMNS = 8


def _solve_in_parts(solve, b):
    """``solve(b)`` with the columns of ``b`` shared among one thread per core (:func:`compute_threads`).

    ``solve(part, out)`` solves the F-ordered columns ``part`` into ``out``; it must release the GIL and
    only read the factor, as SuperLU's solves do (SuperLU is thread-safe since version 5, which scipy
    ships, and scipy releases the GIL around it). Parts start at multiples of :data:`PART_COLUMNS`, so
    the numbers do not depend on how many cores shared the block (tested). A block's solve uses one core
    (on one BLAS thread, see :func:`one_blas_thread`), so the second core would otherwise idle: 19 columns
    at a million unknowns took 3.0 s on two threads against 5.5 s on one (1000 x 1000 benchmark, same run).
    """
    b2 = np.asfortranarray(b.reshape(b.shape[0], -1))
    m = b2.shape[1]
    count = max(1, min(compute_threads(), m // PART_COLUMNS))        # parts of PART_COLUMNS / 2 columns or more
    bounds = np.minimum(np.round(np.linspace(0, m, count + 1) / PART_COLUMNS).astype(int) * PART_COLUMNS, m)
    bounds[-1] = m
    parts = [slice(lo, hi) for lo, hi in zip(bounds[:-1], bounds[1:]) if hi > lo]
    x = np.empty(b2.shape, order="F")
    on_threads(lambda part: solve(b2[:, part], x[:, part]), parts)
    return x.reshape(b.shape)


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


def factorize(matrix, *, method="auto", tolerance=1e-8, n_rhs=1, ordering=None, pieces_grounded=False,
              fallback=None, product=None, lower=None):
    """Prepare a symmetric positive definite sparse system for repeated solves.

    Parameters
    ----------
    matrix : sparse array, shape (n, n)
        A grounded Laplacian (or another SPD M-matrix).
    method : {"auto", "direct", "multigrid", "superlu", "pardiso", "cholmod"}
        ``auto`` follows :func:`choose_method`; ``direct`` uses
        :func:`direct_engine`; ``superlu``, ``cholmod`` and ``pardiso`` name a direct engine.
    tolerance : float
        Relative residual target of the multigrid solves, which fail past
        ``10 * tolerance`` (CG stops on a preconditioned norm); direct solves
        fail past ``max(tolerance, 1e-6)``. Each right-hand side is checked.
    n_rhs : int
        How many right-hand sides are expected; informs ``auto``.
    ordering : ndarray of int, shape (n,), optional
        A fill-reducing permutation for the SuperLU and CHOLMOD engines: unknown
        ``ordering[i]`` is eliminated i-th. Ignored by the other engines.
    product : callable, optional
        ``product(x)`` returns ``matrix @ x`` for the residual checks; with it the solver keeps no
        reference to ``matrix`` once factorised, so the caller can free it (a direct factor holds
        its own copy of what the solves need). For large grids, where the matrix takes gigabytes.
    fallback : bool, optional
        Whether a CHOLMOD factor found too large for the memory by its symbolic analysis (more than
        :data:`CHOLMOD_MEMORY_SHARE` of what is available) makes way for multigrid, with the reason
        logged; default: when ``method`` is ``auto``. Callers that resolved ``auto`` themselves pass True.
    pieces_grounded : bool
        The caller knows that every connected piece of the system has a row tied to ground (as for a
        connected graph with one node grounded), which skips the search for loose pieces (a
        connected-components pass); the diagonal is checked all the same.
    lower : sparse CSC array, optional
        The system given as its lower triangle in ``ordering``'s order (from :func:`grounded_lower`), with
        ``matrix`` None: what CHOLMOD reads, so that the whole matrix is never formed. The other engines
        get the whole matrix back from it.

    Returns
    -------
    Solver

    Raises
    ------
    SolverError
        Unknown method; an engine asked for whose package is missing;
        the factorisation failed (a singular, ungrounded system).

    Notes
    -----
    Cost on a 2-D grid of n cells with a nested-dissection ordering
    (George 1973, "Nested dissection of a regular finite element mesh",
    SIAM J. Numer. Anal. 10:345, doi:10.1137/0710032): factorisation
    O(n^1.5) time and O(n log n) memory, each solve O(n log n).
    """
    if method not in METHODS:
        raise SolverError(f"solver method must be one of {', '.join(METHODS)}; got {method!r}.")
    if not 0.0 < tolerance < 1.0:
        raise SolverError(f"tolerance must be a relative residual between 0 and 1, such as 1e-8; got {tolerance!r}.")
    if fallback is None:
        fallback = method == "auto"
    n = (matrix if lower is None else lower).shape[0]
    if method == "auto":
        method = choose_method(n, n_rhs, memory=available_memory())
    engine = None
    if method == "direct":
        engine = direct_engine()
    elif method in ("superlu", "pardiso", "cholmod"):
        engine, method = method, "direct"
        if not _installed(engine):
            package = {"cholmod": "cvxopt", "pardiso": "pypardiso (x86-64 only)"}[engine]
            raise SolverError(f"solver method '{engine}' needs the optional package {package} "
                              "(pip install 'landflow[fast]'); use 'direct' or 'superlu' instead.")
    permutation = None
    if ordering is not None:
        ordering = _check_ordering(ordering, n)
        if not np.array_equal(ordering, np.arange(n)):
            permutation = ordering
    if lower is not None and (engine != "cholmod" or not pieces_grounded or product is None):
        matrix = _full_from_lower(lower, permutation)
    if matrix is not None:
        if not isinstance(matrix, sp.csr_array):
            matrix = sp.csr_array(matrix)
        _check_grounded(matrix, pieces=not pieces_grounded)
    else:
        _check_diagonal(lower.data[lower.indptr[:-1]], permutation)     # sorted columns start at their diagonal
    if engine != "cholmod":
        return Solver(matrix, method, tolerance, engine=engine, ordering=ordering, product=product)
    # CHOLMOD reads the lower triangle (in the given order). With ``product`` nothing else needs the
    # matrix, so this function's reference goes before the numeric phase: when the caller passed the
    # matrix as a temporary, its memory is then free for the factor (1.7 GB on 16 million cells).
    if lower is None:
        lower = _lower_csc(matrix, permutation)
    if product is not None:
        del matrix
        matrix = None
    reason = None
    try:
        return Solver(matrix, method, tolerance, engine=engine, ordering=ordering, product=product,
                      memory_share=CHOLMOD_MEMORY_SHARE if fallback else None, lower=lower)
    except _FactorTooLarge as exc:
        reason = str(exc)
    log.info("solver: multigrid instead of a direct factorisation: %s", reason)
    if matrix is None:
        matrix = _full_from_lower(lower, permutation)
    del lower
    return Solver(matrix, "multigrid", tolerance)


def _check_grounded(matrix, pieces=True):
    """Refuse a system with a connected piece that no node ties to ground, from its structure alone.

    A grounded Laplacian is a symmetric M-matrix whose row sums are the
    conductances to ground. A connected piece of its graph is singular exactly
    when no row of the piece has a positive sum (Kirchhoff's matrix-tree
    theorem; e.g. Biggs 1993, Algebraic Graph Theory, ch. 6, from memory), so
    this is decided before any factorisation, for every engine, without
    relying on a pivot meeting an exact zero. A row counts as tied to ground
    when its sum exceeds 1e-12 of its diagonal, above rounding of the sum.
    """
    from scipy.sparse.csgraph import connected_components

    if matrix.shape[0] == 0:
        return
    diagonal = matrix.diagonal()
    _check_diagonal(diagonal)
    if not pieces:
        return
    off_diagonal = np.add.reduceat(np.abs(matrix.data), matrix.indptr[:-1]) - diagonal   # rows are never empty
    tied = diagonal - off_diagonal > 1e-12 * diagonal
    if tied.all():
        return
    count, piece = connected_components(matrix, directed=False)
    grounded = np.zeros(count, dtype=bool)
    grounded[piece[tied]] = True
    if not grounded.all():
        loose = np.flatnonzero(~grounded)
        sizes = np.bincount(piece, minlength=count)[loose]
        raise SolverError(f"{loose.size} connected piece(s) of the system ({int(sizes.sum())} unknowns, the "
                          f"first being unknown {int(np.flatnonzero(piece == loose[0])[0])}) have no tie to "
                          f"ground, so the system has no unique solution. {_SINGULAR}")


def _check_diagonal(diagonal, ordering=None):
    """Refuse a diagonal entry that is not positive and finite (no grounded Laplacian has one).

    ``ordering``: the diagonal is in that order (entry j is unknown ``ordering[j]``), undone in the message.
    """
    bad = ~((diagonal > 0) & np.isfinite(diagonal))
    if bad.any():
        at = int(np.flatnonzero(bad)[0])
        row = at if ordering is None else int(ordering[at])
        raise SolverError(f"the system's unknown {row} has diagonal {float(diagonal[at])!r}; a grounded Laplacian "
                          f"needs a positive, finite diagonal. {_SINGULAR}")


def _point_pypardiso_at_mkl():
    """Name MKL's runtime library for pypardiso when it sits in the usual place, sparing its recursive search."""
    if "PYPARDISO_MKL_RT" not in os.environ:
        found = sorted(Path(sys.prefix, "lib").glob("libmkl_rt.so*"), key=lambda p: len(p.name))
        if found:
            os.environ["PYPARDISO_MKL_RT"] = str(found[0])


def _check_ordering(ordering, n):
    ordering = np.asarray(ordering, dtype=np.int64)
    if (ordering.shape != (n,) or (n and (ordering.min() < 0 or ordering.max() >= n))
            or not np.array_equal(np.bincount(ordering, minlength=n), np.ones(n, np.int64))):
        raise SolverError(f"ordering must be a permutation of 0..{n - 1}; got an array of shape "
                          f"{ordering.shape} that is not one.")
    return ordering


def _symmetric_csc(matrix):
    """The CSC form of a symmetric CSR matrix without a transposed copy: its rows read as columns.

    Indices are sorted (in place, a no-op when they already are), as SuperLU expects.
    """
    if matrix.format == "csc":
        return matrix
    csc = sp.csc_matrix((matrix.data, matrix.indices, matrix.indptr), shape=matrix.shape)
    csc.sort_indices()
    return csc


def _norm(v):
    """Euclidean norm of a vector without BLAS (numpy's norm calls BLAS dot, whose threads stall on a busy machine)."""
    return float(np.sqrt(np.einsum("i,i->", v, v)))


def _relative_residual(matrix, x, b):
    """The worst relative residual ||b - A x|| / ||b|| over the columns of b (the absolute one where b = 0).

    ``matrix`` is A, or a function computing A x.
    Column by column, so that a badly solved right-hand side is not averaged away by well solved ones.
    Column-major blocks (as the direct engines return them) go one contiguous column at a time, others
    through one sparse product for the whole block.
    """
    product = matrix if callable(matrix) else matrix.__matmul__
    if x.ndim == 2 and x.flags.f_contiguous and b.flags.f_contiguous:    # contiguous columns: one product each
        norm_r = np.array([_norm(b[:, j] - product(x[:, j])) for j in range(x.shape[1])])
    else:
        r = product(x)
        r -= b
        norm_r = np.atleast_1d(np.sqrt(np.einsum("i...,i...->...", r, r)))
        del r
    norm_b = np.atleast_1d(np.sqrt(np.einsum("i...,i...->...", b, b)))
    relative = np.divide(norm_r, norm_b, out=norm_r.copy(), where=norm_b > 0)
    return float(relative.max()) if relative.size else 0.0
