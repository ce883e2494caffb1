"""Graph invariants: the Laplacian, node numbering, patch merging, barriers and pieces."""

import numpy as np
import pytest

import landflow as lf


@pytest.fixture
def surface():
    values = np.random.default_rng(9).lognormal(size=(6, 7))
    values[0, :2] = np.nan
    patches = np.zeros((6, 7), dtype=int)
    patches[0, 0] = 5                      # on nodata: ignored
    patches[2, 2:4], patches[5, 6], patches[0, 6] = 7, 3, 3
    return values, patches


@pytest.mark.parametrize("neighbours", [4, 8])
def test_laplacian_is_symmetric_with_zero_row_sums(surface, neighbours):
    values, patches = surface
    graph = lf.build_graph(lf.Grid.from_array(values, cell_size=(10.0, 20.0)), patches, neighbours=neighbours)
    laplacian = graph.laplacian().toarray()
    np.testing.assert_allclose(laplacian, laplacian.T, rtol=0, atol=0)
    np.testing.assert_allclose(laplacian.sum(axis=1), 0.0, atol=1e-12)
    off = laplacian - np.diag(np.diag(laplacian))
    assert (off <= 0).all() and (np.diag(laplacian) > 0).all()
    assert (graph.conductance.diagonal() == 0).all()
    extra = np.arange(graph.n_nodes, dtype=float)
    np.testing.assert_allclose(graph.laplacian(extra).diagonal(), np.diag(laplacian) + extra)


def test_nodes_patches_first_and_cells_back(surface):
    values, patches = surface
    graph = lf.build_graph(lf.Grid.from_array(values), patches)
    np.testing.assert_array_equal(graph.patch_ids, [3, 7])
    assert graph.n_nodes == np.isfinite(values).sum() - 4 + 2      # four valid patch cells become two nodes
    assert (graph.node_of_cell[np.isnan(values)] == -1).all()
    assert graph.node_of_cell[5, 6] == graph.node_of_cell[0, 6] == 0
    assert (graph.node_of_cell[2, 2:4] == 1).all()
    free = graph.node_of_cell[(patches == 0) & np.isfinite(values)]
    np.testing.assert_array_equal(np.sort(free), np.arange(2, graph.n_nodes))
    raster = graph.to_raster(np.arange(graph.n_nodes))
    assert raster.dtype == np.float32 and np.isnan(raster[np.isnan(values)]).all()
    assert raster[0, 6] == raster[5, 6] == 0 and raster[2, 3] == 1


def test_merged_patch_sums_parallel_edges():
    # a 2 x 2 block, patch = left column, unit resistance and 1 m cells, 4 neighbours:
    # the patch joins each right cell by one unit edge; 8 neighbours add a diagonal of 1 / sqrt 2 each
    patches = np.array([[1, 0], [1, 0]])
    four = lf.build_graph(lf.Grid.from_array(np.ones((2, 2))), patches, neighbours=4)
    np.testing.assert_allclose(four.conductance.toarray(), [[0, 1, 1], [1, 0, 1], [1, 1, 0]])
    eight = lf.build_graph(lf.Grid.from_array(np.ones((2, 2))), patches, neighbours=8)
    c = 1 + 1 / np.sqrt(2)
    np.testing.assert_allclose(eight.conductance.toarray(), [[0, c, c], [c, 0, 1], [c, 1, 0]])


def test_conductance_zero_is_a_barrier():
    values = np.array([[1.0, 0.0, 1.0], [1.0, 0.0, 1.0]])
    graph = lf.build_graph(lf.Grid.from_array(values), kind="conductance")
    assert (graph.node_of_cell[:, 1] == -1).all()
    assert graph.components.max() == 1                        # two pieces
    assert graph.n_nodes == 4


def test_bad_options(surface):
    values, patches = surface
    grid = lf.Grid.from_array(values)
    with pytest.raises(lf.InputError, match="neighbours must be 4 or 8, got 6"):
        lf.build_graph(grid, neighbours=6)
    with pytest.raises(lf.InputError, match="edge_rule must be one of mean_resistance, mean_conductance; got 'max'"):
        lf.build_graph(grid, edge_rule="max")
    with pytest.raises(lf.InputError, match=r"patch labels have shape \(2, 2\), the grid \(6, 7\)"):
        lf.build_graph(grid, np.zeros((2, 2), dtype=int))
    for bad, shown, dtype in [(-1, "-1", int), (-1, "-1", float), (1.5, "1.5", float), (np.nan, "nan", float)]:
        labels = np.zeros((6, 7), dtype=dtype)
        labels[2, 3] = bad
        with pytest.raises(lf.InputError, match=rf"1 patch label\(s\) in the landscape are not whole numbers >= 0; "
                                                rf"first at row 2, col 3 \(x=3.5, y=-2.5\), label {shown}\. Label patches 1, 2"):
            lf.build_graph(grid, labels)
    with pytest.raises(lf.InputError, match="kind must be 'resistance' or 'conductance', got 'friction'"):
        lf.build_graph(grid, kind="friction")
    with pytest.raises(lf.InputError, match=r"no cell is part of the landscape: every cell is nodata"):
        lf.build_graph(lf.Grid.from_array(np.full((2, 2), np.nan)))


def test_rotated_grid_is_refused():
    from affine import Affine
    with pytest.raises(lf.InputError, match="rotated or sheared.*warp it to a north-up grid"):
        lf.Grid(np.ones((2, 2)), np.ones((2, 2), bool), Affine(1, 0.5, 0, 0, -1, 0))


@pytest.mark.parametrize("cell_size", [0.0, -10.0, (10.0, np.inf)])
def test_cell_size_must_be_a_positive_length(cell_size):
    with pytest.raises(lf.InputError, match=r"cell_size must be positive map lengths \(width, height\); got "):
        lf.Grid.from_array(np.ones((2, 2)), cell_size=cell_size)


def test_transform_with_zero_cell_size_is_refused():
    from affine import Affine
    with pytest.raises(lf.InputError, match=r"array: the transform gives cells of 0 x 1 map units; cell width and "
                                            r"height must be finite and non-zero"):
        lf.Grid(np.ones((2, 2)), np.ones((2, 2), bool), Affine(0, 0, 0, 0, -1, 0))


@pytest.mark.parametrize("seed", range(4))
def test_component_labels_are_scipys_undirected_ones(seed):
    # strong components of the symmetric matrix, renumbered by first node, are scipy's undirected labelling
    # (which numbers pieces in the order of their first node) and networkx's pieces
    import networkx as nx
    import scipy.sparse as sp
    from scipy.sparse.csgraph import connected_components
    rng = np.random.default_rng(seed)
    values = rng.lognormal(size=(40, 50))
    values[rng.random(values.shape) < 0.62] = np.nan         # past the 8-neighbour percolation threshold: many pieces
    graph = lf.build_graph(lf.Grid.from_array(values))
    labels = graph.components
    count, expected = connected_components(graph.conductance, directed=False)
    assert count > 20
    np.testing.assert_array_equal(labels, expected)
    assert labels.dtype == expected.dtype
    pieces = nx.connected_components(nx.from_scipy_sparse_array(sp.csr_array(graph.conductance)))
    assert sorted(sorted(p) for p in pieces) == sorted(np.flatnonzero(labels == c).tolist() for c in range(count))


def test_patch_nodes_keep_their_label_order_and_free_cells_their_cell_order():
    labels = np.array([[0, 9, 0, 2], [2, 0, 0, 9], [0, 4, 0, 0]])
    graph = lf.build_graph(lf.Grid.from_array(np.ones(labels.shape)), labels)
    np.testing.assert_array_equal(graph.patch_ids, [2, 4, 9])
    np.testing.assert_array_equal(graph.node_of_cell, [[3, 2, 4, 0], [0, 5, 6, 2], [7, 1, 8, 9]])
