"""The shifted-view graph assembly against scikit-image's pixel graph with an explicit P^T A P merge."""

import numpy as np
import pytest
import scipy.sparse as sp
from skimage.graph import pixel_graph

import landflow as lf


def reference(values, mask, labels, neighbours, spacing):
    """Cell graph from skimage.graph.pixel_graph, merged by the aggregation product P^T A P."""
    def mean_resistance(a, b, d):
        return 2.0 / (d * (a + b))

    graph, cells = pixel_graph(values, mask=mask, edge_function=mean_resistance,
                               connectivity=1 if neighbours == 4 else 2, spacing=spacing)
    cell_labels = labels.reshape(-1)[cells]
    ids = np.unique(cell_labels[cell_labels > 0])
    node = np.empty(cells.size, dtype=np.int64)
    node[cell_labels > 0] = np.searchsorted(ids, cell_labels[cell_labels > 0])
    free = cell_labels == 0
    node[free] = ids.size + np.arange(free.sum())
    p = sp.csr_array((np.ones(cells.size), (np.arange(cells.size), node)))
    merged = (p.T @ graph @ p).toarray()
    np.fill_diagonal(merged, 0.0)
    return merged, ids


@pytest.mark.parametrize("neighbours", [4, 8])
def test_matches_pixel_graph_with_merged_patches(neighbours):
    rng = np.random.default_rng(8)
    rows, cols = 17, 23
    values = np.exp(rng.normal(size=(rows, cols)))
    mask = rng.random((rows, cols)) > 0.15
    labels = np.where(rng.random((rows, cols)) > 0.9, rng.integers(1, 4, (rows, cols)), 0)
    grid = lf.Grid.from_array(np.where(mask, values, np.nan), cell_size=(3.0, 2.0))   # width 3, height 2
    graph = lf.build_graph(grid, labels, neighbours=neighbours)
    expected, ids = reference(values, mask, labels, neighbours, spacing=(2.0, 3.0))
    assert np.array_equal(graph.patch_ids, ids)
    np.testing.assert_allclose(graph.conductance.toarray(), expected, rtol=1e-14, atol=0)
    assert (graph.conductance.diagonal() == 0).all()
