"""Patch-free flow: current summed over all pairs of source nodes on a ring around a buffered window."""

from __future__ import annotations

import numpy as np
from affine import Affine

from ..errors import InputError
from ..grid import Grid

__all__ = ["ring_nodes", "ring_offset", "buffered_window", "ring_current", "ring_current_grid", "shifted"]


def shifted(transform, row, col):
    """The transform of a window whose top-left cell is (row, col) of ``transform``'s grid (may be negative)."""
    t = transform
    return Affine(t.a, t.b, t.c + t.a * col + t.b * row, t.d, t.e, t.f + t.d * col + t.e * row)


def ring_offset(seed):
    """Where the first ring node sits, as a share of the spacing between nodes, drawn from ``seed``.

    The same seed always gives the same placement (numpy's PCG64 generator).

    >>> ring_offset(1) == ring_offset(1)
    True
    """
    return float(np.random.default_rng(seed).random())


def ring_nodes(shape, k, offset=0.0):
    """Rows and columns of ``k`` cells spread evenly along the outer edge of a ``shape`` box.

    The perimeter is walked clockwise from the top-left corner (P = 2 (rows + cols) - 4
    cells); node i sits at perimeter position floor((offset + i) P / k).

    Parameters
    ----------
    shape : (rows, cols), each at least 2
    k : int, 2 <= k <= P
    offset : float in [0, 1)
        Shift of every node, as a share of the spacing P / k (see :func:`ring_offset`).

    Examples
    --------
    >>> rows, cols = ring_nodes((3, 3), 4)
    >>> list(zip(rows.tolist(), cols.tolist()))
    [(0, 0), (0, 2), (2, 2), (2, 0)]
    """
    rows, cols = int(shape[0]), int(shape[1])
    if rows < 2 or cols < 2:
        raise InputError(f"a ring needs a box of at least 2 x 2 cells; got {rows} x {cols}.")
    perimeter = 2 * (rows + cols) - 4
    if not 2 <= k <= perimeter:
        raise InputError(f"ring_nodes must be between 2 and the ring's {perimeter} cells; got {k}.")
    if not 0.0 <= offset < 1.0:
        raise InputError(f"the ring offset must be in [0, 1); got {offset}.")
    pos = np.floor((offset + np.arange(k)) * perimeter / k).astype(np.int64)
    r = np.empty(k, dtype=np.int64)
    c = np.empty(k, dtype=np.int64)
    top = pos < cols                                           # left to right along row 0
    right = (pos >= cols) & (pos < cols + rows - 1)            # down the last column
    bottom = (pos >= cols + rows - 1) & (pos < 2 * cols + rows - 2)   # right to left along the last row
    left = pos >= 2 * cols + rows - 2                          # up the first column
    r[top], c[top] = 0, pos[top]
    r[right], c[right] = pos[right] - cols + 1, cols - 1
    r[bottom], c[bottom] = rows - 1, (2 * cols + rows - 3) - pos[bottom]
    r[left], c[left] = (2 * rows + 2 * cols - 4) - pos[left], 0
    return r, c


def _pair(buffer_cells):
    """``b`` or ``(rows, cols)`` as a pair of whole numbers of cells."""
    b = np.broadcast_to(np.asarray(buffer_cells), (2,))
    return int(b[0]), int(b[1])


def buffered_window(values, mask, buffer_cells, buffer_value):
    """The window widened by ``buffer_cells`` (one number, or rows and columns) on every side, filled with
    ``buffer_value``; buffer cells are all valid."""
    br, bc = _pair(buffer_cells)
    if min(br, bc) < 0:
        raise InputError(f"the buffer must be 0 cells or wider; got {buffer_cells}.")
    width = ((br, br), (bc, bc))
    padded = np.pad(np.where(mask, values, buffer_value), width, mode="constant", constant_values=buffer_value)
    padded_mask = np.pad(np.asarray(mask, bool), width, mode="constant", constant_values=True)
    return padded, padded_mask


def ring_current_grid(grid, *, buffer_cells, k, buffer_value, offset=0.0):
    """The buffered grid and the ring's patch labels that :func:`ring_current` solves on."""
    values, mask = buffered_window(grid.values, grid.mask, buffer_cells, buffer_value)
    br, bc = _pair(buffer_cells)
    transform = shifted(grid.transform, -br, -bc)
    big = Grid(values, mask, transform, grid.crs, source=grid.source, nodata=grid.nodata)
    labels = np.zeros(values.shape, dtype=np.int64)
    r, c = ring_nodes(values.shape, k, offset)
    labels[r, c] = np.arange(1, k + 1)
    return big, labels


def ring_current(grid, *, buffer_cells, k, buffer_value, offset=0.0, kind="resistance", neighbours=8,
                 edge_rule="mean_resistance", values_per="length", method="auto", tolerance=1e-8):
    """Current through every cell summed over all pairs of ``k`` source nodes on a ring around the window.

    The window is widened by a buffer of ``buffer_cells`` cells of value
    ``buffer_value`` (a resistance or conductance, as ``kind`` says); ``k``
    single-cell nodes are spread evenly along the buffer's outer edge
    (:func:`ring_nodes`), and each pair of them exchanges a unit current. With
    the ring nodes as point patches this is landflow's current density
    (:func:`landflow.analyses.current.current_density`): one factorisation,
    k - 1 solves and the sorted sum over the k (k - 1) / 2 pairs. Sources in a
    buffer around the map take most of the map boundary's bias out of the
    current (Koen, Garroway, Wilson & Bowman 2010, PLoS ONE 5:e11785,
    doi:10.1371/journal.pone.0011785); pairs of nodes on the perimeter of a
    buffered map give connectivity maps without patches (Koen, Bowman, Sadowski
    & Walpole 2014, Methods in Ecology and Evolution 5:626,
    doi:10.1111/2041-210X.12197).

    Parameters
    ----------
    grid : Grid
        The window: resistance (or conductance) per unit length; cells outside
        ``grid.mask`` are barriers.
    buffer_cells : int or (int, int)
        Buffer width in cells (the same on all sides, or rows and columns).
    k : int
        Number of ring nodes (pairs: k (k - 1) / 2).
    buffer_value : float
        Resistance (or conductance) of the buffer cells.
    offset : float in [0, 1)
        Shift of the ring nodes (:func:`ring_offset`).
    kind, neighbours, edge_rule, values_per : as in :func:`landflow.graph.build_graph`.
    method, tolerance : as in :func:`landflow.analyses.resistance.patch_voltages`.

    Returns
    -------
    flow : ndarray of float64, shape (rows + 2 b, cols + 2 b)
        Current through each cell of the buffered window, A summed over pairs
        of unit currents; NaN outside the landscape.
    solvers : list of Solver

    Notes
    -----
    Cost: that of one factorisation of the buffered window plus k - 1
    solves, and O(edges k log k) for the pair sum.
    """
    from ..analyses.current import current_density
    from ..analyses.resistance import patch_voltages
    from ..graph import build_graph

    if min(_pair(buffer_cells)) < 1:
        raise InputError(f"the buffer must be at least one cell wide (the ring nodes sit on its outer edge); "
                         f"got {buffer_cells}.")
    if not np.isfinite(buffer_value) or buffer_value <= 0:
        raise InputError(f"the buffer's {kind} must be a finite number above 0; got {buffer_value!r}.")
    big, labels = ring_current_grid(grid, buffer_cells=buffer_cells, k=k, buffer_value=buffer_value,
                                    offset=offset)
    graph = build_graph(big, labels, kind=kind, neighbours=neighbours, edge_rule=edge_rule, values_per=values_per)
    voltages = patch_voltages(graph, method=method, tolerance=tolerance)
    flow = current_density(voltages)
    return graph.to_raster(flow, dtype=np.float64), voltages.solvers
