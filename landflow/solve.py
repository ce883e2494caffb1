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
    cvxopt is GPL-3 licensed, which is why it is optional).
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
           "choose_method", "direct_engine", "factor_bytes", "available_memory"]

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


_SINGULAR = ("The system is singular: some part of the graph is not tied to a grounded node "
             "(an ungrounded Laplacian).")


#: Bytes of a direct factor per unknown and per doubling of the unknowns, on a 2-D grid in a
#: nested-dissection order (the factor holds O(n log n) numbers; George 1973). From the peaks measured
#: at 4 million unknowns (docs/performance.md): SuperLU 8.2 GB (L and U), Pardiso 6.5 GB; CHOLMOD from
#: its symbolic analysis in landflow's nested-dissection order (supernodal values and row indices:
#: 31.6 bytes at 1 million unknowns); rounded up so that the estimate errs on the safe side.
FACTOR_BYTES_PER_UNKNOWN_LOG2 = {"superlu": 100.0, "pardiso": 80.0, "cholmod": 36.0}

#: Share of the memory available after CHOLMOD's symbolic analysis that its numeric phase may take: the
#: factor plus the two copies of the matrix's triangle made during it (cvxopt packs one, CHOLMOD permutes
#: and transposes it into another; 2.6 GB next to a 12.2 GB factor at 16 million unknowns, measured).
#: Above it, ``auto`` falls back to multigrid.
CHOLMOD_MEMORY_SHARE = 0.95

#: Bytes per stored entry of the triangle (a double and a 64-bit row index) in each of those copies.
_CHOLMOD_COPY_BYTES = 2 * 16


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
    setup_seconds : float
    worst_residual : float
        The largest relative residual seen so far.
    iterations : list of int
        CG iterations per right-hand side (multigrid only).
    """

    def __init__(self, matrix, method, tolerance, *, engine=None, ordering=None, memory_share=None, product=None,
                 cholmod_system=None):
        self.matrix = matrix
        self.n_unknowns = int(matrix.shape[0] if matrix is not None else cholmod_system.size[0])
        self.method = method
        self.engine = engine or ("pyamg" if method == "multigrid" else "superlu")
        self.tolerance = tolerance
        self.worst_residual = 0.0
        self.iterations = []
        self.n_solved = 0
        self.solve_seconds = 0.0
        self.ordering = None
        self.factor_nonzeros = None
        self.factor_size = {}
        start = time.perf_counter()
        if self.engine == "superlu":
            if ordering is not None:
                ordering = _check_ordering(ordering, matrix.shape[0])
                if np.array_equal(ordering, np.arange(ordering.size)):
                    permuted = _symmetric_csc(matrix)   # already in the wanted order: no copy of the permutation
                else:
                    self.ordering = ordering
                    permuted = _symmetric_csc(matrix[ordering][:, ordering])
                spec = "NATURAL"
            else:
                permuted, spec = _symmetric_csc(matrix), "MMD_AT_PLUS_A"
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
            try:
                self._pardiso.factorize(self._upper)
            except Exception as exc:  # pypardiso raises its own error class on a failed phase
                raise SolverError(f"direct factorisation (pardiso) failed: {exc}. {_SINGULAR}") from exc
        elif self.engine == "cholmod":
            if ordering is not None:
                ordering = _check_ordering(ordering, self.n_unknowns)
            if cholmod_system is None:
                cholmod_system = _cholmod_system(matrix)
            self._factor, self.factor_size = _cholmod_factor(cholmod_system, ordering, memory_share=memory_share)
            del cholmod_system
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

    def solve(self, b):
        """Solve for one right-hand side (n,) or several (n, m); returns float64 of b's shape."""
        if getattr(self, "_released", False):
            raise SolverError(f"this {self.method} solver was released after its solves (Solver.release); "
                              "factorise the system again to solve more right-hand sides.")
        b = np.asarray(b, dtype=np.float64)
        start = time.perf_counter()
        if self.engine == "superlu":
            with one_blas_thread():
                if self.ordering is None:
                    x = self._lu.solve(b)
                else:
                    x = np.empty_like(b)
                    x[self.ordering] = self._lu.solve(b[self.ordering])
            limit = max(DIRECT_RESIDUAL_LIMIT, self.tolerance)
        elif self.engine == "pardiso":
            x = np.asarray(self._pardiso.solve(self._upper, b)).reshape(b.shape)
            limit = max(DIRECT_RESIDUAL_LIMIT, self.tolerance)
        elif self.engine == "cholmod":
            x = _cholmod_solve(self._factor, b)
            limit = max(DIRECT_RESIDUAL_LIMIT, self.tolerance)
        else:
            x = np.column_stack([self._cg(col) for col in b.reshape(b.shape[0], -1).T]).reshape(b.shape)
            limit = self.tolerance * 10  # CG stops on a preconditioned norm; allow that slack
        residual = _relative_residual(self._product or self.matrix, x, b)
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


def _cholmod_system(matrix):
    """The lower triangle of a symmetric scipy matrix as the cvxopt sparse matrix CHOLMOD reads."""
    from cvxopt import matrix as dense, spmatrix

    lower = _lower_csc(matrix)
    columns = np.repeat(np.arange(lower.shape[1], dtype=np.int64), np.diff(lower.indptr))
    system = spmatrix(dense(lower.data), dense(lower.indices.astype(np.int64)), dense(columns), lower.shape)
    del lower, columns
    return system


def _scipy_from_cholmod_system(system):
    """The whole symmetric scipy matrix back from its lower triangle in cvxopt form (for a fall-back)."""
    colptr, rowind, values = (np.asarray(a).ravel() for a in system.CCS)
    n = system.size[0]
    lower = sp.csc_array((values, rowind, colptr), shape=(n, n))
    return sp.csr_array(lower + lower.T - sp.diags_array(lower.diagonal()))


def _cholmod_factor(system, ordering=None, *, memory_share=None):
    """CHOLMOD's supernodal Cholesky factor of an SPD matrix, through cvxopt.

    ``system`` is the matrix's lower triangle from :func:`_cholmod_system`.

    With ``ordering`` (a fill-reducing permutation, such as landflow's nested dissection) CHOLMOD uses
    it as given; otherwise it orders the unknowns itself (AMD). Returns the factor and its size from the
    symbolic analysis (:func:`_cholmod_size`). With ``memory_share``, a factor needing more than that
    share of the memory available after the symbolic analysis raises :class:`_FactorTooLarge` before
    the numeric phase allocates it. Chen, Davis, Hager & Rajamanickam 2008, "Algorithm 887: CHOLMOD,
    supernodal sparse Cholesky factorization and update/downdate", ACM TOMS 35:22,
    doi:10.1145/1391989.1391995.
    """
    from cvxopt import cholmod, matrix as dense

    n = system.size[0]
    saved = dict(cholmod.options)
    try:
        if ordering is not None:
            cholmod.options["nmethods"] = 1          # the given order only, without also trying AMD
            factor = cholmod.symbolic(system, p=dense(ordering.astype(np.int64), tc="i"))
        else:
            factor = cholmod.symbolic(system)
    finally:
        cholmod.options.clear()
        cholmod.options.update(saved)
    size = _cholmod_size(factor, n)
    if memory_share is not None and "bytes" in size:
        free = available_memory()
        need = size["bytes"] + _CHOLMOD_COPY_BYTES * len(system)
        if free is not None and need > memory_share * free:
            raise _FactorTooLarge(f"the CHOLMOD factor of {n} unknowns needs {size['bytes'] / 1e9:.1f} GB "
                                  f"and its numeric phase {need / 1e9:.1f} GB, more than {round(100 * memory_share)}% "
                                  f"of the {free / 1e9:.1f} GB available")
    try:
        cholmod.numeric(system, factor)
    except ArithmeticError as exc:      # not positive definite: a pivot <= 0
        raise SolverError(f"direct factorisation (cholmod) failed: {exc}. {_SINGULAR}") from None
    return factor, size


def _lower_csc(matrix):
    """The lower triangle of a symmetric CSR matrix as CSC with sorted indices: its upper triangle's rows.

    Row i of the upper triangle (columns >= i) is column i of the lower one, so no transposed copy is made
    and only the kept entries are copied.
    """
    rows = np.repeat(np.arange(matrix.shape[0], dtype=matrix.indices.dtype), np.diff(matrix.indptr))
    keep = matrix.indices >= rows
    del rows
    counts = np.add.reduceat(keep, matrix.indptr[:-1]) if matrix.nnz else np.zeros(matrix.shape[0], int)
    indptr = np.concatenate([[0], np.cumsum(counts)])
    lower = sp.csc_matrix((matrix.data[keep], matrix.indices[keep], indptr), shape=matrix.shape)
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


def _cholmod_size(factor, n):
    """The size of a CHOLMOD factor from its symbolic analysis, read from CHOLMOD's factor structure.

    cvxopt gives no access to it, so the fields are read with ctypes from the ``cholmod_factor`` the
    capsule holds, whose leading fields have kept their layout since CHOLMOD 1.0 (n, minor, Perm,
    ColCount, ..., nsuper, ssize, xsize, ..., ordering, is_ll, is_super, ..., itype). Returns
    ``nonzeros`` (nonzeros of L, the sum of its column counts), ``bytes`` (supernodal values
    and row indices: 8 (xsize + ssize)), ``supernodes`` and ``ordering``; an empty dict when the
    structure does not look as expected (another CHOLMOD build), so nothing wrong is ever recorded.
    """
    import ctypes

    try:
        name = ctypes.pythonapi.PyCapsule_GetName
        name.restype, name.argtypes = ctypes.c_char_p, [ctypes.py_object]
        pointer = ctypes.pythonapi.PyCapsule_GetPointer
        pointer.restype, pointer.argtypes = ctypes.c_void_p, [ctypes.py_object, ctypes.c_char_p]
        address = pointer(factor, name(factor))
        sizes = (ctypes.c_size_t * 18).from_address(address)
        flags = (ctypes.c_int * 5).from_address(address + 22 * ctypes.sizeof(ctypes.c_size_t))
        colcount = ctypes.c_void_p.from_address(address + 3 * ctypes.sizeof(ctypes.c_size_t)).value
        ordering, is_super, itype = flags[0], flags[2], flags[4]
        if sizes[0] != n or itype not in (0, 2) or is_super not in (0, 1) or not colcount:
            return {}
        integer = ctypes.c_int64 if itype == 2 else ctypes.c_int32      # CHOLMOD_LONG or CHOLMOD_INT
        counts = np.frombuffer((integer * n).from_address(colcount), dtype=np.dtype(integer))
        nonzeros = int(counts.sum())
        if not n <= nonzeros <= n * (n + 1) // 2:
            return {}
        out = {"nonzeros": nonzeros,
               "ordering": {0: "natural", 1: "given", 2: "amd", 3: "metis", 4: "nesdis", 5: "colamd",
                            6: "postordered"}.get(ordering, str(ordering))}
        if is_super:
            nsuper, ssize, xsize = sizes[13], sizes[14], sizes[15]
            if nonzeros <= xsize <= 64 * nonzeros and 0 < nsuper <= n:
                out["bytes"] = int(8 * (xsize + ssize))
                out["supernodes"] = int(nsuper)
        return out
    except (AttributeError, ValueError, TypeError, OSError):
        return {}


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
              fallback=None, product=None):
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
    if method == "auto":
        method = choose_method(matrix.shape[0], n_rhs, memory=available_memory())
    engine = None
    if method == "direct":
        engine = direct_engine()
    elif method in ("superlu", "pardiso", "cholmod"):
        engine, method = method, "direct"
        if not _installed(engine):
            package = {"cholmod": "cvxopt", "pardiso": "pypardiso (x86-64 only)"}[engine]
            raise SolverError(f"solver method '{engine}' needs the optional package {package} "
                              "(pip install 'landflow[fast]'); use 'direct' or 'superlu' instead.")
    if not isinstance(matrix, sp.csr_array):
        matrix = sp.csr_array(matrix)
    _check_grounded(matrix, pieces=not pieces_grounded)
    if engine != "cholmod":
        return Solver(matrix, method, tolerance, engine=engine, ordering=ordering, product=product)
    # CHOLMOD reads its own copy of the lower triangle. With ``product`` nothing else needs the matrix,
    # so this function's reference goes before the numeric phase: when the caller passed the matrix as
    # a temporary, its memory is then free for the factor (1.7 GB on 16 million cells).
    system = _cholmod_system(matrix)
    if product is not None:
        del matrix
        matrix = None
    reason = None
    try:
        return Solver(matrix, method, tolerance, engine=engine, ordering=ordering, product=product,
                      memory_share=CHOLMOD_MEMORY_SHARE if fallback else None, cholmod_system=system)
    except _FactorTooLarge as exc:
        reason = str(exc)
    log.info("solver: multigrid instead of a direct factorisation: %s", reason)
    if matrix is None:
        matrix = _scipy_from_cholmod_system(system)
    del system
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

    n = matrix.shape[0]
    if n == 0:
        return
    diagonal = matrix.diagonal()
    if np.any(diagonal <= 0) or not np.all(np.isfinite(diagonal)):
        row = int(np.flatnonzero(~(diagonal > 0))[0]) if np.any(~(diagonal > 0)) else \
            int(np.flatnonzero(~np.isfinite(diagonal))[0])
        raise SolverError(f"the system's unknown {row} has diagonal {float(diagonal[row])!r}; a grounded Laplacian "
                          f"needs a positive, finite diagonal. {_SINGULAR}")
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
