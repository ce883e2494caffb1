"""The solver interface: backends agree, failures raise SolverError, and record() reports what happened."""

from contextlib import nullcontext

import numpy as np
import pytest
import scipy.sparse as sp

import landflow as lf
from landflow import solve as solve_module
from landflow.solve import DIRECT_MAX_UNKNOWNS, DIRECT_MIN_RHS, choose_method, direct_engine, factorize


@pytest.fixture(scope="module")
def grounded():
    """The Laplacian of a 60 x 60 log-normal resistance surface (8 neighbours) grounded at node 0."""
    values = np.random.default_rng(42).lognormal(0.0, 1.0, size=(60, 60))
    laplacian = lf.build_graph(lf.Grid.from_array(values, cell_size=25.0)).laplacian()
    return laplacian[1:, 1:]


def _rhs(n, m=3):
    b = np.zeros((n, m))
    b[np.random.default_rng(0).choice(n, m, replace=False), np.arange(m)] = 1.0
    return b


class TestBackendsAgree:
    def test_direct_and_multigrid_agree(self, grounded):
        b = _rhs(grounded.shape[0])
        direct = factorize(grounded, method="direct").solve(b)
        multigrid = factorize(grounded, method="multigrid", tolerance=1e-10).solve(b)
        assert np.max(np.abs(direct - multigrid)) <= 1e-6 * np.max(np.abs(direct))

    def test_single_and_multiple_right_hand_sides(self, grounded):
        b = _rhs(grounded.shape[0])
        for method in ("direct", "multigrid"):
            solver = factorize(grounded, method=method, tolerance=1e-10)
            together = solver.solve(b)
            assert together.shape == b.shape
            column = solver.solve(b[:, 1])
            assert column.shape == (b.shape[0],)
            np.testing.assert_allclose(column, together[:, 1], rtol=1e-7, atol=1e-9)

    def test_solution_satisfies_the_system(self, grounded):
        b = _rhs(grounded.shape[0], 1)[:, 0]
        x = factorize(grounded, method="direct").solve(b)
        assert np.linalg.norm(grounded @ x - b) <= 1e-10 * np.linalg.norm(b)

    @pytest.mark.parametrize("threads, columns, parts", [(2, 7, [7]), (2, 9, [9]), (2, 19, [8, 11]), (3, 19, [8, 11]),
                                                         (2, 32, [16, 16]), (4, 24, [8, 8, 8])])
    def test_superlu_columns_shared_among_threads_give_the_one_thread_result(self, grounded, threads, columns,
                                                                            parts, monkeypatch):
        # the block's columns go to several threads in parts that start at multiples of eight columns, so
        # each column is solved as in the whole block: the same numbers to the last bit, whatever the cores
        b = _rhs(grounded.shape[0], columns)
        solver = factorize(grounded, method="superlu")
        monkeypatch.setattr(solve_module, "compute_threads", lambda: 1)
        alone = solver.solve(b)
        seen = []
        real = solver._lu

        class Recording:
            def solve(self, part):
                seen.append(part.shape[1])
                return real.solve(part)
        monkeypatch.setattr(solver, "_lu", Recording())
        monkeypatch.setattr(solve_module, "compute_threads", lambda: threads)
        shared = solver.solve(b)
        assert sorted(seen) == sorted(parts)
        np.testing.assert_array_equal(shared, alone)

    @pytest.mark.parametrize("method", [m for m in ("superlu", "cholmod", "pardiso") if solve_module._installed(m)]
                             + ["multigrid"])
    def test_the_engines_start_is_announced_once_to_whoever_asked(self, grounded, method):
        # when_engine_starts calls its function as a direct engine takes over (once, however many
        # factorisations follow in the block), and never for multigrid, whose set-up holds the GIL
        calls = []
        with solve_module.when_engine_starts(lambda: calls.append(1)):
            assert calls == []
            factorize(grounded, method=method)
            factorize(grounded, method=method)
        assert calls == ([] if method == "multigrid" else [1])
        factorize(grounded, method=method)          # outside the block nobody is told
        assert len(calls) <= 1

    def test_auto_picks_direct_up_to_the_limit(self, grounded):
        assert choose_method(DIRECT_MAX_UNKNOWNS, n_rhs=DIRECT_MIN_RHS, engine="superlu") == "direct"
        assert choose_method(DIRECT_MAX_UNKNOWNS + 1, n_rhs=DIRECT_MIN_RHS, engine="superlu") == "multigrid"
        assert factorize(grounded).method == "direct"


needs_pardiso = pytest.mark.skipif(not solve_module._installed("pardiso"),
                                   reason="pypardiso (the 'fast' extra) is not installed")


@pytest.fixture(scope="module")
def graph():
    """A 30 x 40 log-normal landscape with three one-cell patches."""
    values = np.random.default_rng(7).lognormal(0.0, 1.0, size=(30, 40))
    labels = np.zeros(values.shape, dtype=np.int64)
    labels[2, 2], labels[25, 30], labels[12, 18] = 1, 2, 3
    return lf.build_graph(lf.Grid.from_array(values), labels)


class TestLowerTriangle:
    """factorize's ``lower``: the system as the lower triangle that CHOLMOD reads, made from a graph."""

    @pytest.fixture(params=[1, 2, 3], ids=["one band", "two bands", "three bands"])
    def bands(self, request, monkeypatch):
        """The system made in this many bands of unknowns, one thread each."""
        monkeypatch.setattr(solve_module, "compute_threads", lambda: request.param)
        monkeypatch.setattr(solve_module, "GROUNDED_BAND_MIN_ENTRIES", 1)
        return request.param

    def test_whole_matrix_equals_scipys_grounded_submatrix(self, graph, bands):
        # against scipy's own indexing of L[nodes][:, nodes], in a shuffled elimination order, made in bands
        nodes = np.random.default_rng(3).permutation(np.arange(1, graph.n_nodes))
        matrix = solve_module.grounded_matrix(graph.conductance, graph.total_conductance, nodes)
        expected = sp.csr_array(graph.laplacian()[nodes][:, nodes])
        expected.sort_indices()
        assert matrix.format == "csr" and matrix.has_sorted_indices
        np.testing.assert_array_equal(matrix.indptr, expected.indptr)
        np.testing.assert_array_equal(matrix.indices, expected.indices)
        np.testing.assert_array_equal(matrix.data, expected.data)

    def test_equals_scipys_lower_triangle_of_the_grounded_submatrix(self, graph, bands):
        # against scipy's own indexing and tril of L[nodes][:, nodes], in a shuffled elimination order, in bands
        nodes = np.random.default_rng(1).permutation(np.arange(1, graph.n_nodes))
        lower = solve_module.grounded_lower(graph.conductance, graph.total_conductance, nodes)
        expected = sp.csc_array(sp.tril(graph.laplacian()[nodes][:, nodes]))
        expected.sort_indices()
        assert lower.has_sorted_indices and lower.indices.dtype == np.int64
        np.testing.assert_array_equal(lower.indptr, expected.indptr)
        np.testing.assert_array_equal(lower.indices, expected.indices)
        np.testing.assert_array_equal(lower.data, expected.data)

    @pytest.mark.parametrize("engine", ["superlu", "multigrid"])
    def test_a_system_given_as_its_lower_triangle_solves_as_the_matrix_does(self, graph, engine):
        # the engines that need the whole matrix get it back from the triangle, in the caller's order
        keep = np.arange(1, graph.n_nodes)
        ordering = np.random.default_rng(2).permutation(keep.size)
        lower = solve_module.grounded_lower(graph.conductance, graph.total_conductance, keep[ordering])
        matrix = graph.laplacian()[1:, 1:]
        b = _rhs(keep.size)
        x = factorize(None, lower=lower, ordering=ordering, method=engine, tolerance=1e-12).solve(b)
        np.testing.assert_allclose(x, sp.linalg.spsolve(sp.csc_array(matrix), b), rtol=1e-9)

    def test_a_bad_diagonal_is_named_in_the_callers_numbering(self, graph):
        keep = np.arange(1, graph.n_nodes)
        ordering = keep[::-1] - 1
        diagonal = graph.total_conductance.copy()
        diagonal[5] = np.nan                                # node 5 is unknown 4
        lower = solve_module.grounded_lower(graph.conductance, diagonal, keep[ordering])
        with pytest.raises(lf.SolverError, match=r"unknown 4 has diagonal nan; a grounded Laplacian needs"):
            factorize(None, lower=lower, ordering=ordering, method="superlu")


class TestFailures:
    @pytest.mark.parametrize("engine", ["superlu", "multigrid", pytest.param("pardiso", marks=needs_pardiso)])
    def test_an_isolated_node_is_refused_before_factorising(self, engine):
        matrix = sp.csr_array(np.diag([1.0, 0.0, 2.0]))     # an isolated, ungrounded node
        with pytest.raises(lf.SolverError, match=r"unknown 1 has diagonal 0\.0; a grounded Laplacian needs a "
                                                 r"positive, finite diagonal\. The system is singular"):
            factorize(matrix, method=engine)

    @pytest.mark.parametrize("engine", ["superlu", "multigrid", pytest.param("pardiso", marks=needs_pardiso)])
    @pytest.mark.parametrize("values", ["unit", "lognormal"])
    def test_an_ungrounded_laplacian_is_refused_before_factorising(self, engine, values):
        # decided from the structure (a piece without a tie to ground), whatever the rounding or the pivots
        grid = np.ones((6, 6)) if values == "unit" else np.random.default_rng(0).lognormal(size=(6, 6))
        laplacian = lf.build_graph(lf.Grid.from_array(grid)).laplacian()
        with pytest.raises(lf.SolverError, match=r"1 connected piece\(s\) of the system \(36 unknowns, the first "
                                                 r"being unknown 0\) have no tie to ground"):
            factorize(laplacian, method=engine)

    def test_a_grounded_piece_beside_an_ungrounded_one_is_refused(self):
        laplacian = lf.build_graph(lf.Grid.from_array(np.ones((4, 4)))).laplacian().tocsr()
        grounded = laplacian[1:, 1:]                         # node 0 grounded: the rest is fine
        both = sp.block_diag([grounded, laplacian], format="csr")
        assert factorize(grounded, method="superlu").method == "direct"
        with pytest.raises(lf.SolverError, match=r"1 connected piece\(s\) of the system \(16 unknowns, the first "
                                                 r"being unknown 15\)"):
            factorize(both, method="superlu")

    @pytest.mark.parametrize("method", ["superlu", "multigrid"])
    def test_every_solve_is_checked_against_its_residual_limit(self, grounded, method, monkeypatch):
        solver = factorize(grounded, method=method)
        b = _rhs(grounded.shape[0], 2)
        good = solver.solve(b)
        wrong = good.copy()
        wrong[:, 1] *= 1.01                                   # one bad column among good ones
        monkeypatch.setattr(solver, "_lu" if method == "superlu" else "_ml", _Returns(wrong, method, b))
        fix = "singular or nearly so" if method == "superlu" else "Try solver method 'direct'"
        with pytest.raises(lf.SolverError, match=rf"solve reached relative residual .*{fix}") as err:
            solver.solve(b)
        assert err.value.residual > 1e-6

    def test_tolerance_that_cannot_be_met(self, grounded):
        solver = factorize(grounded[:400, :400], method="multigrid", tolerance=1e-30)
        with pytest.raises(lf.SolverError, match=r"multigrid solve reached relative residual .* above 1e-29\. "
                                                 r"Try solver method 'direct' or a looser tolerance") as err:
            solver.solve(np.ones(400))
        assert err.value.iterations == 500
        assert 0 < err.value.residual < 1e-6
        assert isinstance(err.value, RuntimeError)            # catchable as a builtin, too

    def test_residual_is_checked_per_right_hand_side(self):
        # a right-hand side solved badly is not averaged away by a much larger one solved exactly
        from landflow.solve import _relative_residual
        matrix = sp.csr_array(np.eye(2))
        b = np.array([[1e6, 0.0], [0.0, 1.0]])
        x = np.array([[1e6, 0.0], [0.0, 0.5]])
        assert _relative_residual(matrix, x, b) == pytest.approx(0.5)
        assert _relative_residual(matrix, x[:, 1], b[:, 1]) == pytest.approx(0.5)
        assert _relative_residual(matrix, np.zeros((2, 1)), np.zeros((2, 1))) == 0.0

    def test_unknown_method(self, grounded):
        with pytest.raises(lf.SolverError, match="solver method must be one of auto, direct, multigrid, superlu, pardiso, "
                                                 "cholmod; got .fast."):
            factorize(grounded, method="fast")


class TestRecord:
    def test_direct(self, grounded):
        solver = factorize(grounded, method="direct")
        solver.solve(_rhs(grounded.shape[0], 3))
        solver.solve(_rhs(grounded.shape[0], 1)[:, 0])
        record = solver.record()
        assert record["method"] == "direct"
        assert record["unknowns"] == grounded.shape[0]
        assert record["right_hand_sides"] == 4
        assert 0 <= record["worst_relative_residual"] <= 1e-10
        assert record["setup_seconds"] >= 0 and record["solve_seconds"] >= 0
        assert "cg_iterations_max" not in record
        assert repr(solver).startswith("Solver(method='direct', unknowns=3599, solved=4")

    def test_multigrid(self, grounded):
        solver = factorize(grounded, method="multigrid", tolerance=1e-8)
        solver.solve(_rhs(grounded.shape[0], 2))
        record = solver.record()
        assert record["method"] == "multigrid"
        assert record["right_hand_sides"] == 2
        assert 0 < record["worst_relative_residual"] <= 1e-7
        assert 0 < record["cg_iterations_max"] < 500
        assert record["cg_iterations_max"] == max(solver.iterations) and len(solver.iterations) == 2

    def test_record_is_json_ready(self, grounded):
        import json
        solver = factorize(grounded, method="direct")
        solver.solve(np.ones(grounded.shape[0]))
        assert json.loads(json.dumps(solver.record())) == solver.record()


class _Returns:
    """Stands in for a factor or hierarchy that returns a given (wrong) solution."""

    def __init__(self, x, method, b):
        self.x, self.method, self.b, self.column = x, method, b, 0

    def solve(self, b, **kwargs):
        if self.method == "superlu":     # the columns of x for the columns of b asked for (the solver may split b)
            b2 = b.reshape(b.shape[0], -1)
            return self.x[:, [next(j for j in range(self.b.shape[1]) if np.array_equal(self.b[:, j], col))
                              for col in b2.T]].reshape(b.shape)
        column = self.x[:, self.column % self.x.shape[1]]
        self.column += 1
        kwargs.get("residuals", []).extend([1.0, 0.0])
        return column


class TestThreads:
    def test_the_variable_sets_the_threads_and_a_bad_value_is_named(self, monkeypatch, caplog):
        monkeypatch.setenv(solve_module.THREADS_VARIABLE, "3")
        assert solve_module.compute_threads() == 3
        monkeypatch.setattr(solve_module.os, "sched_getaffinity", lambda pid: {0, 1, 2, 3}, raising=False)
        monkeypatch.setattr(solve_module, "_WARNED_THREADS", set())
        for bad in ("0", "two", "-1"):
            monkeypatch.setenv(solve_module.THREADS_VARIABLE, bad)
            with caplog.at_level("WARNING", logger="landflow"):
                assert solve_module.compute_threads() == 4
                assert solve_module.compute_threads() == 4
            assert caplog.text.count(f"LANDFLOW_THREADS={bad!r} is not a whole number of threads >= 1; using the "
                                     "cores instead. Set it to 1, 2, ... or unset it.") == 1
        monkeypatch.delenv(solve_module.THREADS_VARIABLE)
        assert solve_module.compute_threads() == 4

    def test_workers_share_the_cores(self, monkeypatch):
        monkeypatch.setattr(solve_module.os, "sched_getaffinity", lambda pid: set(range(8)), raising=False)
        assert [solve_module.cores_per_worker(w) for w in (1, 2, 3, 8, 16)] == [8, 4, 2, 1, 1]

    def test_a_local_batch_worker_uses_its_share(self):
        # the initializer of the batch's worker processes, run in a process of its own (it installs signal handlers)
        import subprocess
        import sys
        code = ("import os; from landflow.study.batch import _worker_start; _worker_start(3); "
                "from landflow.solve import compute_threads; print(os.environ['LANDFLOW_THREADS'], compute_threads())")
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=True)
        assert out.stdout.split() == ["3", "3"]
