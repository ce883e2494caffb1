"""Solver selection, the direct engines, the nested-dissection ordering and the fast current sum."""

import itertools

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

import landflow as lf
from landflow import solve
from landflow.analyses import current as current_module
from landflow.errors import SolverError
from landflow.graph import nested_dissection_order

HAVE_PARDISO = solve._installed("pardiso")
HAVE_CHOLMOD = solve._installed("cholmod")
ENGINES = ["superlu", "multigrid"] + (["pardiso"] if HAVE_PARDISO else []) + (["cholmod"] if HAVE_CHOLMOD else [])


def lognormal_graph(rows, cols, patches, seed=0):
    rng = np.random.default_rng(seed)
    labels = np.zeros((rows, cols), dtype=np.int64)
    for p, (r, c) in enumerate(patches, start=1):
        labels[r, c] = p
    return lf.build_graph(lf.Grid.from_array(np.exp(rng.normal(size=(rows, cols)))), labels)


class TestChooseMethod:
    # SuperLU and Pardiso: bounded by size (their factors outgrow the machine); CHOLMOD by memory alone
    @pytest.mark.parametrize("engine", ["superlu", "pardiso"])
    def test_direct_up_to_the_documented_size(self, engine):
        for n_rhs in (1, 9, 49, 1000):
            assert solve.choose_method(1_000, n_rhs, engine=engine) == "direct"
            assert solve.choose_method(solve.DIRECT_ALWAYS_UNKNOWNS, n_rhs, engine=engine) == "direct"
        for n_rhs in (solve.DIRECT_MIN_RHS, 49):
            assert solve.choose_method(solve.DIRECT_MAX_UNKNOWNS, n_rhs, engine=engine) == "direct"

    @pytest.mark.parametrize("engine", ["superlu", "pardiso"])
    def test_multigrid_for_few_right_hand_sides_in_the_middle_band(self, engine):
        for n_rhs in range(1, solve.DIRECT_MIN_RHS):
            assert solve.choose_method(solve.DIRECT_ALWAYS_UNKNOWNS + 1, n_rhs, engine=engine) == "multigrid"
            assert solve.choose_method(solve.DIRECT_MAX_UNKNOWNS, n_rhs, engine=engine) == "multigrid"

    @pytest.mark.parametrize("engine", ["superlu", "pardiso"])
    def test_multigrid_above_the_documented_size(self, engine):
        for n_rhs in (1, 9, 49, 1000):
            assert solve.choose_method(solve.DIRECT_MAX_UNKNOWNS + 1, n_rhs, engine=engine) == "multigrid"
            assert solve.choose_method(16_000_000, n_rhs, engine=engine) == "multigrid"

    def test_cholmod_is_bounded_by_memory_not_size(self, caplog):
        need = solve.factor_bytes(16_000_000, "cholmod")
        assert solve.choose_method(16_000_000, 9, engine="cholmod") == "direct"
        assert solve.choose_method(16_000_000, 1, memory=need * 1.01, engine="cholmod") == "direct"
        with caplog.at_level("INFO", logger="landflow"):
            assert solve.choose_method(16_000_000, 9, memory=need * 0.99, engine="cholmod") == "multigrid"
        assert "the cholmod factor of 16000000 unknowns" in caplog.text

    def test_auto_records_its_choice(self):
        graph = lognormal_graph(20, 20, [(2, 2), (17, 15)])
        record = lf.patch_voltages(graph, method="auto").solvers[0].record()
        assert record["method"] == "direct"
        assert record["engine"] == solve.direct_engine()


class TestBackendsAgree:
    def test_mid_sized_grid_to_1e6(self):
        graph = lognormal_graph(150, 150, [(10, 10), (140, 20), (75, 75), (20, 130), (135, 140)], seed=3)
        results = {m: lf.effective_resistance(lf.patch_voltages(graph, method=m)) for m in ENGINES}
        reference = results["superlu"]
        off = ~np.eye(5, dtype=bool)
        for method, r in results.items():
            np.testing.assert_allclose(r[off], reference[off], rtol=1e-6, err_msg=method)

    @pytest.mark.parametrize("method", ENGINES + ["direct"])
    def test_grid_corner_to_corner(self, method):
        # 4 x 4 nodes of unit resistors, opposite corners: R = 13/7 (OEIS A357113, finite grid resistance).
        # 4 neighbours, resistance 1 per unit length, 1 m cells: every edge is a unit resistor.
        labels = np.zeros((4, 4), dtype=np.int64)
        labels[0, 0], labels[3, 3] = 1, 2
        graph = lf.build_graph(lf.Grid.from_array(np.ones((4, 4))), labels, neighbours=4)
        r = lf.effective_resistance(lf.patch_voltages(graph, method=method))
        assert r[0, 1] == pytest.approx(13 / 7, rel=1e-7)

    @pytest.mark.skipif(not HAVE_PARDISO, reason="pypardiso (the 'fast' extra) is not installed")
    def test_pardiso_equals_superlu_to_1e8(self):
        graph = lognormal_graph(60, 70, [(5, 5), (50, 60), (30, 10), (8, 66)], seed=5)
        a = lf.patch_voltages(graph, method="superlu")
        b = lf.patch_voltages(graph, method="pardiso")
        np.testing.assert_allclose(lf.effective_resistance(b), lf.effective_resistance(a), rtol=1e-8)
        assert b.solvers[0].record()["engine"] == "pardiso"

    @pytest.mark.skipif(not HAVE_CHOLMOD, reason="cvxopt (CHOLMOD, the 'fast' extra) is not installed")
    @pytest.mark.parametrize("seed", [5, 6])
    def test_cholmod_equals_superlu_to_1e10(self, seed):
        graph = lognormal_graph(60, 70, [(5, 5), (50, 60), (30, 10), (8, 66)], seed=seed)
        a = lf.patch_voltages(graph, method="superlu")
        b = lf.patch_voltages(graph, method="cholmod")
        np.testing.assert_allclose(lf.effective_resistance(b), lf.effective_resistance(a), rtol=1e-10)
        np.testing.assert_allclose(lf.current_density(b), lf.current_density(a), rtol=1e-10, atol=1e-12)
        assert b.solvers[0].record()["engine"] == "cholmod"

    @pytest.mark.skipif(not HAVE_CHOLMOD, reason="cvxopt (CHOLMOD, the 'fast' extra) is not installed")
    def test_cholmod_on_a_landscape_in_pieces_equals_superlu(self):
        # two pieces, each with patches, and a masked column between them: two factorisations,
        # each in its own nested-dissection order, neither a slice of the whole Laplacian
        rng = np.random.default_rng(11)
        values = np.exp(rng.normal(size=(30, 41)))
        values[:, 20] = np.nan
        labels = np.zeros(values.shape, dtype=np.int64)
        labels[3, 3], labels[25, 15], labels[4, 30], labels[26, 38], labels[15, 35] = 1, 2, 3, 4, 5
        graph = lf.build_graph(lf.Grid.from_array(values), labels)
        a = lf.patch_voltages(graph, method="superlu")
        b = lf.patch_voltages(graph, method="cholmod")
        assert len(b.solvers) == 2
        np.testing.assert_allclose(lf.effective_resistance(b), lf.effective_resistance(a), rtol=1e-10)

    @pytest.mark.skipif(not HAVE_CHOLMOD, reason="cvxopt (CHOLMOD, the 'fast' extra) is not installed")
    def test_cholmod_on_a_lower_triangle_alone(self):
        # the route of patch_voltages: no whole matrix at all, the residuals from a product
        graph = lognormal_graph(40, 30, [(2, 2), (35, 25)], seed=4)
        sub = graph.laplacian()[1:, 1:]
        ordering = np.random.default_rng(3).permutation(sub.shape[0])
        rhs = np.zeros((sub.shape[0], 2))
        rhs[[10, 700], [0, 1]] = 1.0

        def triangle(diagonal):
            return solve.grounded_lower(graph.conductance, diagonal, ordering + 1)
        solver = solve.factorize(None, lower=triangle(graph.total_conductance), ordering=ordering,
                                 method="cholmod", pieces_grounded=True, product=sub.__matmul__)
        assert solver.matrix is None
        np.testing.assert_allclose(solver.solve(rhs), spla.spsolve(sp.csc_array(sub), rhs), rtol=1e-10)
        diagonal = graph.total_conductance.copy()
        diagonal[ordering[7] + 1] = 0.0
        with pytest.raises(lf.SolverError, match=rf"unknown {ordering[7]} has diagonal 0\.0"):
            solve.factorize(None, lower=triangle(diagonal), ordering=ordering, method="cholmod",
                            pieces_grounded=True, product=sub.__matmul__)

    @pytest.mark.skipif(not HAVE_CHOLMOD, reason="cvxopt (CHOLMOD, the 'fast' extra) is not installed")
    def test_cholmod_dense_and_sparse_right_hand_sides_agree(self):
        graph = lognormal_graph(40, 30, [(2, 2), (35, 25)], seed=4)
        sub = graph.laplacian()[1:, 1:]
        solver = solve.factorize(sub, method="cholmod")
        rng = np.random.default_rng(0)
        dense_rhs = rng.normal(size=(sub.shape[0], 3))
        sparse_rhs = np.zeros((sub.shape[0], 3))
        sparse_rhs[[0, 100, 500], [0, 1, 2]] = 1.0
        for b in (dense_rhs, sparse_rhs, sparse_rhs[:, 1]):
            x = solver.solve(b)
            assert x.shape == b.shape
            np.testing.assert_allclose(sub @ x, b, atol=1e-9)

    @pytest.mark.skipif(not HAVE_CHOLMOD, reason="cvxopt (CHOLMOD, the 'fast' extra) is not installed")
    def test_cholmod_numeric_phase_on_landflow_arrays_equals_cvxopts(self, monkeypatch):
        # The numeric phase through CHOLMOD's C interface on landflow's own arrays, with the factor marked
        # as natural, against cvxopt's own numeric phase (its packed copy, CHOLMOD's permuted transposes)
        # and against SuperLU (scipy), in the nested-dissection order and in CHOLMOD's own (AMD).
        import sys
        graph = lognormal_graph(45, 50, [(4, 4), (40, 45), (20, 30)], seed=12)
        sub = graph.laplacian()[1:, 1:]
        order = nested_dissection_order(graph)
        ordering = order[order != 0] - 1
        rhs = np.zeros((sub.shape[0], 2), order="F")
        rhs[[10, 1500], [0, 1]] = 1.0
        reference = solve.factorize(sub, method="superlu").solve(rhs)
        if sys.platform.startswith("linux"):        # the wheels bundle the library there
            assert solve._CholmodLibrary.load() is not None
        direct = {key: solve.factorize(sub, method="cholmod", ordering=o).solve(rhs)
                  for key, o in (("nd", ordering), ("amd", None))}
        monkeypatch.setattr(solve._CholmodLibrary, "load", classmethod(lambda cls: None))
        through_cvxopt = {key: solve.factorize(sub, method="cholmod", ordering=o).solve(rhs)
                          for key, o in (("nd", ordering), ("amd", None))}
        for key in direct:
            np.testing.assert_allclose(direct[key], reference, rtol=1e-10, atol=1e-13)
            np.testing.assert_allclose(through_cvxopt[key], direct[key], rtol=1e-12, atol=1e-15)

    @pytest.mark.skipif(not HAVE_CHOLMOD, reason="cvxopt (CHOLMOD, the 'fast' extra) is not installed")
    def test_a_factor_analysed_on_landflow_arrays_is_freed_with_its_solver(self, monkeypatch):
        library = solve._CholmodLibrary.load()
        if library is None:
            pytest.skip("CHOLMOD's C interface is not reachable here")
        freed = []
        real = solve._CholmodLibrary.free_factor
        monkeypatch.setattr(solve._CholmodLibrary, "free_factor",
                            lambda self, address: (freed.append(address), real(self, address)))
        graph = lognormal_graph(20, 20, [(1, 1), (18, 18)], seed=4)
        solver = solve.factorize(graph.laplacian()[1:, 1:], method="cholmod")
        address = solver._factor.address
        assert solver.record()["factor_supernodes"] >= 1        # supernodal (LL'), as asked
        solver.release()
        assert freed == [address]

    @pytest.mark.skipif(not HAVE_CHOLMOD, reason="cvxopt (CHOLMOD, the 'fast' extra) is not installed")
    def test_only_an_identity_permutation_is_marked_natural(self):
        from cvxopt import cholmod, matrix as dense
        graph = lognormal_graph(12, 10, [(1, 1), (10, 8)], seed=3)
        sub = graph.laplacian()[1:, 1:]
        n = sub.shape[0]
        system = solve._cvxopt_lower(solve._lower_csc(sub))
        saved = dict(cholmod.options)
        cholmod.options.update(nmethods=1, postorder=False)
        try:
            shuffled = cholmod.symbolic(system, p=dense(np.arange(n)[::-1].copy(), tc="i"))
            identity = cholmod.symbolic(system, p=dense(np.arange(n), tc="i"))
        finally:
            cholmod.options.clear()
            cholmod.options.update(saved)
        assert not solve._cholmod_mark_natural(shuffled, n)
        assert solve._cholmod_size(shuffled, n)["ordering"] == "given"
        assert solve._cholmod_mark_natural(identity, n)
        assert solve._cholmod_size(identity, n)["ordering"] == "natural"
        assert not solve._cholmod_mark_natural(identity, n)       # marked once: no longer "given"

    @pytest.mark.skipif(not HAVE_CHOLMOD, reason="cvxopt (CHOLMOD, the 'fast' extra) is not installed")
    @pytest.mark.parametrize("through_cvxopt", [False, True])
    def test_cholmod_refuses_a_matrix_that_is_not_positive_definite(self, monkeypatch, through_cvxopt):
        import scipy.sparse as sp
        if through_cvxopt:
            monkeypatch.setattr(solve._CholmodLibrary, "load", classmethod(lambda cls: None))
        indefinite = sp.csr_array(np.array([[2.0, -3.0, 0.0], [-3.0, 2.0, -1.0], [0.0, -1.0, 2.0]]))
        with pytest.raises(SolverError, match=r"direct factorisation \(cholmod\) failed: the matrix is not "
                                              r"positive definite \(pivot 1\)"):
            solve._cholmod_factor(solve._lower_csc(indefinite), ordered=True)

    def test_superlu_agrees_with_scipy_spsolve(self):
        # scipy's general sparse solver on the grounded Laplacian, no landflow ordering involved.
        import scipy.sparse.linalg as sla
        graph = lognormal_graph(30, 25, [(3, 3), (25, 20), (12, 4)], seed=7)
        lap = graph.laplacian()
        sub = lap[1:, 1:].tocsc()
        rhs = np.zeros((sub.shape[0], 2))
        rhs[0, 0] = rhs[1, 1] = 1.0
        expected = sla.spsolve(sub, rhs)
        got = lf.patch_voltages(graph, method="superlu").potential[1:, 1:3]
        np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-12)


class TestOrdering:
    def test_is_a_permutation_with_patches_last(self):
        graph = lognormal_graph(33, 47, [(1, 1), (30, 40), (16, 20)])
        order = nested_dissection_order(graph)
        assert np.array_equal(np.sort(order), np.arange(graph.n_nodes))
        assert set(order[-3:]) == {0, 1, 2}

    def test_ordering_does_not_change_solutions(self):
        graph = lognormal_graph(40, 30, [(2, 2), (35, 25)])
        sub = graph.laplacian()[1:, 1:]
        rhs = np.random.default_rng(1).normal(size=(sub.shape[0], 3))
        plain = solve.factorize(sub, method="superlu").solve(rhs)
        order = nested_dissection_order(graph)
        ordered = solve.factorize(sub, method="superlu", ordering=order[order != 0] - 1).solve(rhs)
        np.testing.assert_allclose(ordered, plain, rtol=1e-10, atol=1e-12)

    @pytest.mark.parametrize("shape", [(1, 5), (3, 7), (17, 5), (100, 1), (0, 3), (257, 300), (513, 129), (999, 2)])
    @pytest.mark.parametrize("leaf", [1, 4, 16])
    def test_nested_dissection_ranks_follow_the_recursive_definition(self, shape, leaf):
        # George 1973's dissection written out plainly: both halves of the longer side, then the cutting line;
        # landflow computes each box shape's ranks once and copies them, which must give the same order.
        from landflow.graph import _dissection_rank
        expected = np.empty(shape, dtype=np.int64)
        counter = [0]

        def put(r0, r1, c0, c1):
            n = (r1 - r0) * (c1 - c0)
            expected[r0:r1, c0:c1] = (counter[0] + np.arange(n)).reshape(r1 - r0, c1 - c0)
            counter[0] += n

        def cut(r0, r1, c0, c1):
            h, w = r1 - r0, c1 - c0
            if h <= 0 or w <= 0:
                return
            if h * w <= leaf or min(h, w) <= 2 and max(h, w) <= leaf:
                put(r0, r1, c0, c1)
            elif h >= w:
                m = r0 + h // 2
                cut(r0, m, c0, c1), cut(m + 1, r1, c0, c1), put(m, m + 1, c0, c1)
            else:
                m = c0 + w // 2
                cut(r0, r1, c0, m), cut(r0, r1, m + 1, c1), put(r0, r1, m, m + 1)

        cut(0, shape[0], 0, shape[1])
        np.testing.assert_array_equal(_dissection_rank(shape, leaf), expected)

    def test_nested_dissection_fills_less_than_minimum_degree(self):
        graph = lognormal_graph(80, 80, [(2, 2), (70, 70)])
        sub = graph.laplacian()[1:, 1:]
        order = nested_dissection_order(graph)
        nd = solve.factorize(sub, method="superlu", ordering=order[order != 0] - 1)._lu
        mmd = solve.factorize(sub, method="superlu")._lu
        assert nd.L.nnz + nd.U.nnz < mmd.L.nnz + mmd.U.nnz

    def test_bad_ordering_is_refused(self):
        graph = lognormal_graph(5, 5, [(0, 0), (4, 4)])
        sub = graph.laplacian()[1:, 1:]
        with pytest.raises(SolverError, match="ordering must be a permutation of 0..23"):
            solve.factorize(sub, method="superlu", ordering=np.zeros(sub.shape[0], dtype=int))
        with pytest.raises(SolverError, match="ordering must be a permutation of 0..23"):
            solve.factorize(sub, method="superlu", ordering=np.arange(sub.shape[0]) - 1)


class TestErrors:
    def test_unknown_method(self):
        graph = lognormal_graph(5, 5, [(0, 0), (4, 4)])
        with pytest.raises(SolverError, match="solver method must be one of auto, direct, multigrid"):
            solve.factorize(graph.laplacian()[1:, 1:], method="cholesky")

    def test_released_solver_refuses_to_solve(self):
        graph = lognormal_graph(6, 6, [(0, 0), (5, 5)])
        voltages = lf.patch_voltages(graph, method="superlu")
        solver = voltages.solvers[0]
        assert solver.record()["right_hand_sides"] == 1
        with pytest.raises(SolverError, match="was released after its solves"):
            solver.solve(np.ones(solver.n_unknowns))

    @pytest.mark.parametrize("engine, package", [("pardiso", "pypardiso"), ("cholmod", "cvxopt")])
    def test_engine_missing(self, monkeypatch, engine, package):
        monkeypatch.setattr(solve, "_installed", lambda e: e == "superlu")     # as on a plain install
        graph = lognormal_graph(5, 5, [(0, 0), (4, 4)])
        with pytest.raises(SolverError, match=rf"'{engine}' needs the optional package {package}.*pip install "
                                              r"'landflow\[fast\]'"):
            solve.factorize(graph.laplacian()[1:, 1:], method=engine)


class TestCumulativeCurrentFastSum:
    """The sorted sum over pairs must equal the pairwise sum it replaces."""

    def _voltages(self):
        graph = lognormal_graph(25, 30, [(2, 3), (20, 25), (12, 14), (3, 27), (22, 4)], seed=11)
        return lf.patch_voltages(graph, method="superlu")

    @pytest.mark.parametrize("patch_weight", [None, [1.0, 2.0, 0.5, 3.0, 1.5]])
    def test_equals_the_pairwise_sum(self, patch_weight, monkeypatch):
        voltages = self._voltages()
        weights = lf.pair_weights(voltages, None if patch_weight is None else np.array(patch_weight))
        fast = lf.current_density(voltages, weights)
        monkeypatch.setattr(current_module, "_product_groups", lambda *args: None)
        slow = lf.current_density(voltages, weights)
        np.testing.assert_allclose(fast, slow, rtol=1e-12, atol=1e-14)

    def test_general_weights_fall_back(self):
        voltages = self._voltages()
        weights = lf.pair_weights(voltages)
        weights[0, 1] = weights[1, 0] = 7.0                     # not a product of patch weights
        assert current_module._product_groups(voltages.component_of_patch, weights) is None
        expected = sum(weights[a, b] * lf.pair_current(voltages, a, b)
                       for a, b in itertools.combinations(range(5), 2))
        np.testing.assert_allclose(lf.current_density(voltages, weights), expected, rtol=1e-10)

    def test_against_networkx_current_flow(self):
        # networkx.edge_current_flow_betweenness_centrality_subset (normalized=False) gives, per edge,
        # (1/4) sum over ordered source/target pairs of |current| = (1/2) sum over unordered pairs;
        # a node's throughput is half the sum over its edges plus 1/2 per pair at a source or sink
        # (Brandes & Fleischer 2005, "Centrality measures based on current flow", STACS).
        rows, cols = 6, 7
        rng = np.random.default_rng(4)
        resistance = np.exp(rng.normal(size=(rows, cols)))
        sites = [(0, 0), (5, 6), (2, 4), (4, 1)]
        labels = np.zeros((rows, cols), dtype=np.int64)
        for p, (r, c) in enumerate(sites, start=1):
            labels[r, c] = p
        graph = lf.build_graph(lf.Grid.from_array(resistance), labels, neighbours=4)
        flow = lf.current_density(lf.patch_voltages(graph, method="superlu"))
        g = nx.Graph()
        for r in range(rows):
            for c in range(cols):
                for dr, dc in ((0, 1), (1, 0)):
                    if r + dr < rows and c + dc < cols:
                        cond = 1.0 / ((resistance[r, c] + resistance[r + dr, c + dc]) / 2)
                        g.add_edge((r, c), (r + dr, c + dc), conductance=cond)
        edge_flow = nx.edge_current_flow_betweenness_centrality_subset(
            g, sources=sites, targets=sites, normalized=False, weight="conductance")
        node_flow = {node: 0.0 for node in g}
        for (x, y), value in edge_flow.items():
            node_flow[x] += value
            node_flow[y] += value
        for site in sites:
            node_flow[site] += 0.5 * (len(sites) - 1)
        expected = np.array([node_flow[(r, c)] for r in range(rows) for c in range(cols)])
        got = flow[graph.node_of_cell.ravel()]
        np.testing.assert_allclose(got, expected, rtol=1e-8)


def test_right_hand_sides_in_blocks_give_the_same_voltages(monkeypatch):
    from landflow.analyses import resistance
    graph = lognormal_graph(30, 30, [(1, 1), (28, 3), (15, 15), (4, 26), (27, 27)], seed=9)
    whole = lf.patch_voltages(graph, method="superlu").potential
    monkeypatch.setattr(resistance, "RHS_BLOCK_VALUES", 2 * graph.n_nodes)   # two columns per block
    blocked = lf.patch_voltages(graph, method="superlu").potential
    np.testing.assert_array_equal(blocked, whole)


@pytest.mark.parametrize("columns, unknowns, sizes", [
    (19, 10**6, [19]),                            # 16 columns a block; 3 more do not cost a pass of their own
    (24, 10**6, [12, 12]),                        # half a block more: two even blocks
    (49, 4 * 10**6, [4] * 6 + [5] + [4] * 5),     # 4 a block: twelve, evened out
    (9, 16 * 10**6, [1] * 9),
    (3, 10, [3]),
])
def test_right_hand_sides_are_shared_into_even_blocks(columns, unknowns, sizes):
    from landflow.analyses.resistance import RHS_BLOCK_VALUES, rhs_blocks
    blocks = rhs_blocks(columns, unknowns)
    assert [stop - first for first, stop in blocks] == sizes
    assert blocks[0][0] == 0 and blocks[-1][1] == columns
    assert all(a[1] == b[0] for a, b in zip(blocks, blocks[1:]))
    assert all(stop - first <= 1.5 * max(1, RHS_BLOCK_VALUES // unknowns) for first, stop in blocks)


def set_aside_every_factor(monkeypatch, graph):
    """Make every direct factor count as filling the memory, so that ``graph``'s matrix goes to disk.

    Returns a list that records, for each factorisation, whether the matrix was out of memory then.
    """
    from landflow.analyses import resistance
    monkeypatch.setattr(resistance, "available_memory", lambda: 1e12)
    monkeypatch.setattr(resistance, "SET_ASIDE_SHARE", 0.0)
    seen = []
    real = resistance.factorize

    def factorize(matrix, **kwargs):
        seen.append(graph.conductance is None)
        return real(matrix, **kwargs)
    monkeypatch.setattr(resistance, "factorize", factorize)
    return seen


class TestPatchVoltagesMemory:
    @pytest.mark.parametrize("method", ["superlu"] + (["cholmod"] if HAVE_CHOLMOD else []))
    def test_graph_set_aside_during_the_factorisation_changes_nothing(self, monkeypatch, method, caplog):
        graph = lognormal_graph(30, 35, [(1, 1), (28, 3), (15, 15), (4, 30)], seed=4)
        before = graph.conductance.copy()
        expected = lf.patch_voltages(graph, method=method)
        seen = set_aside_every_factor(monkeypatch, graph)
        with caplog.at_level("INFO", logger="landflow"):
            voltages = lf.patch_voltages(graph, method=method)
        assert seen == [True]                   # the matrix was on disk while the factor was made
        assert "set aside in" in caplog.text
        np.testing.assert_array_equal(voltages.potential, expected.potential)
        assert 0 < voltages.solvers[0].worst_residual < 1e-10            # checked after the release
        for name in ("data", "indices", "indptr"):
            np.testing.assert_array_equal(getattr(graph.conductance, name), getattr(before, name))

    def test_graph_comes_back_when_a_solve_fails(self, monkeypatch):
        graph = lognormal_graph(20, 20, [(1, 1), (18, 18)], seed=5)
        seen = set_aside_every_factor(monkeypatch, graph)

        def fail(self, b):
            raise SolverError("stopped in the middle")
        monkeypatch.setattr(solve.Solver, "_direct_solve", fail)
        with pytest.raises(SolverError, match="stopped in the middle"):
            lf.patch_voltages(graph, method="superlu")
        assert seen == [True]
        assert graph.conductance is not None and graph.conductance.nnz > 0

    def test_a_badly_solved_column_is_caught_once_the_factor_is_released(self, monkeypatch):
        graph = lognormal_graph(25, 25, [(1, 1), (20, 3), (12, 22)], seed=6)
        real = solve.Solver._direct_solve

        def one_bad_column(self, b):
            x = real(self, b)
            x[:, -1] *= 1.01
            return x
        monkeypatch.setattr(solve.Solver, "_direct_solve", one_bad_column)
        with pytest.raises(SolverError, match=r"direct solve reached relative residual .* above 1e-06"):
            lf.patch_voltages(graph, method="superlu")


class TestMemoryAwareChoice:
    def test_a_factor_that_would_not_fit_falls_back_to_multigrid_with_a_reason(self, caplog):
        need = solve.factor_bytes(1_000_000, "superlu")
        with caplog.at_level("INFO", logger="landflow"):
            assert solve.choose_method(1_000_000, 19, memory=need / 0.7 * 1.01, engine="superlu") == "direct"
            assert solve.choose_method(1_000_000, 19, memory=need / 0.7 * 0.99, engine="superlu") == "multigrid"
        assert "multigrid instead of a direct factorisation: the superlu factor of 1000000 unknowns" in caplog.text

    def test_the_estimate_bounds_a_measured_superlu_factor(self):
        # SuperLU's own count of the nonzeros of L and U, 12 bytes each (value and row index), against the
        # estimate used by 'auto' (which must not be smaller, or auto could pick a factor that does not fit)
        graph = lognormal_graph(150, 150, [(5, 5), (140, 140)])
        voltages = lf.patch_voltages(graph, method="superlu")
        record = voltages.solvers[0].record()
        assert 12 * record["factor_nonzeros"] <= solve.factor_bytes(record["unknowns"], "superlu")

    @pytest.mark.skipif(not HAVE_CHOLMOD, reason="cvxopt (CHOLMOD, the 'fast' extra) is not installed")
    def test_cholmod_factor_size_from_its_symbolic_analysis(self, monkeypatch):
        # The nonzeros read from CHOLMOD's symbolic analysis (on landflow's arrays) against the factor L
        # itself, as cvxopt returns it after its own phases in the same order (cholmod.getfactor; it may
        # store some explicit zeros of the supernodes, never fewer entries), and the bytes against them.
        from cvxopt import cholmod
        graph = lognormal_graph(50, 45, [(5, 5), (40, 40)], seed=2)
        record = lf.patch_voltages(graph, method="cholmod").solvers[0].record()
        assert record["factor_ordering"] == "given"
        sub = graph.laplacian()[1:, 1:]
        order = nested_dissection_order(graph)
        monkeypatch.setattr(solve._CholmodLibrary, "load", classmethod(lambda cls: None))
        factor, size = solve._cholmod_factor(solve._lower_csc(sub, order[order != 0] - 1), ordered=True)
        assert size["nonzeros"] == record["factor_nonzeros"]
        stored = len(cholmod.getfactor(factor))
        assert size["nonzeros"] <= stored <= 2 * size["nonzeros"]
        assert 8 * size["nonzeros"] <= record["factor_bytes"] <= solve.factor_bytes(sub.shape[0], "cholmod")

    @pytest.mark.skipif(not HAVE_CHOLMOD, reason="cvxopt (CHOLMOD, the 'fast' extra) is not installed")
    def test_cholmod_too_large_after_its_symbolic_analysis_falls_back_to_multigrid(self, monkeypatch, caplog):
        graph = lognormal_graph(40, 40, [(3, 3), (35, 30), (20, 20)], seed=8)
        monkeypatch.setattr(solve, "available_memory", lambda: 1e5)     # 100 kB: no factor fits
        with caplog.at_level("INFO", logger="landflow"):
            voltages = lf.patch_voltages(graph, method="direct", tolerance=1e-10)
        assert voltages.solvers[0].record()["engine"] == "cholmod"     # asked for 'direct': no fallback
        with caplog.at_level("INFO", logger="landflow"):
            fallback = lf.patch_voltages(graph, method="auto", tolerance=1e-10)
        assert fallback.solvers[0].record()["method"] == "multigrid"
        assert "multigrid instead of a direct factorisation: the CHOLMOD factor of" in caplog.text
        np.testing.assert_allclose(lf.effective_resistance(fallback), lf.effective_resistance(voltages), rtol=1e-7)

    def test_available_memory_is_read_on_linux(self):
        memory = solve.available_memory()
        assert memory is None or memory > 0
