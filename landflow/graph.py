"""From a resistance or conductance grid to a conductance graph between cells.

Every valid cell is a node. Neighbouring cells i, j at centre distance d (map
units) are joined by an edge of conductance

* ``mean_resistance`` (default): C_ij = 1 / (d * (r_i + r_j) / 2)
* ``mean_conductance``:          C_ij = (g_i + g_j) / (2 d)

so the surface value is read as a resistance (or conductance) per unit length.
All cells of a patch are merged into one node (a patch has no internal
resistance); patch nodes come first, in the order of ``patch_ids``.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import NamedTuple

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .errors import InputError

__all__ = ["CellGraph", "CellEdges", "build_graph", "cell_edges", "network_graph", "landscape_mask",
           "nested_dissection_order", "EDGE_RULES", "NEIGHBOURS"]

EDGE_RULES = ("mean_resistance", "mean_conductance")
NEIGHBOURS = (4, 8)


def landscape_mask(grid, kind="resistance"):
    """Cells that become nodes, after checking the values inside the landscape.

    Parameters
    ----------
    grid : Grid
    kind : {"resistance", "conductance"}

    Returns
    -------
    mask : ndarray of bool
        ``grid.mask`` less conductance-0 cells (barriers).

    Raises
    ------
    InputError
        Non-finite values inside the valid area; resistance <= 0; conductance < 0;
        no cell left. The message counts the bad cells and locates the first one.
    """
    if kind not in ("resistance", "conductance"):
        raise InputError(f"kind must be 'resistance' or 'conductance', got {kind!r}.")
    values, mask = grid.values, grid.mask
    fix_nan = (
        f"set them to the nodata value ({grid.nodata:g})"
        if grid.nodata is not None
        else "declare a nodata value for them"
    )
    _reject(grid, mask & ~np.isfinite(values), f"are NaN or infinite inside the landscape; {fix_nan} or give them a value")
    if kind == "resistance":
        _reject(grid, mask & (values <= 0), "have resistance <= 0; resistance must be positive "
                "(use nodata for cells outside the landscape, or a conductance raster where 0 means a barrier)")
        nodes = mask
    else:
        _reject(grid, mask & (values < 0), "have negative conductance; conductance must be >= 0 (0 is a barrier)")
        nodes = mask & (values > 0)
    if not nodes.any():
        what = "every cell is nodata" if not mask.any() else f"every {kind} value is zero"
        raise InputError(f"{grid.source}: no cell is part of the landscape: {what}. "
                         f"Check the nodata value and the {kind} values.")
    inside = values[nodes]
    low, high = inside.min(), inside.max()
    if high > MAX_VALUE_SPAN * low:
        rows, cols = np.nonzero(nodes & (values == (high if high > 1.0 / low else low)))
        barrier = "nodata" if kind == "resistance" else "0 (a barrier)"
        raise InputError(f"{grid.source}: {kind} values span {low:.3g} to {high:.3g}, a ratio above "
                         f"{MAX_VALUE_SPAN:.0e} that double-precision solves cannot resolve; the most extreme is "
                         f"at {grid.where(rows[0], cols[0])}. Mark impassable cells as {barrier} instead of "
                         f"giving them an extreme {kind}, or rescale the values.")
    return nodes


#: Largest ratio of the largest to the smallest resistance (or conductance) in one landscape. Beyond it the
#: grounded Laplacian's condition number exceeds what double precision (about 1e-16) solves to 1e-6 or better
#: (common practice: keep the condition number below 1e16 times the accuracy wanted).
MAX_VALUE_SPAN = 1e10


def _reject(grid, bad, what):
    if bad.any():
        rows, cols = np.nonzero(bad)
        raise InputError(f"{grid.source}: {bad.sum()} cell(s) {what}. "
                         f"First at {grid.where(rows[0], cols[0])}.")


@dataclass(eq=False)
class CellGraph:
    """A conductance graph between landscape cells, with patches merged.

    Attributes
    ----------
    conductance : scipy.sparse.csr_array, shape (n, n)
        Symmetric edge conductances between nodes, zero diagonal. Parallel
        edges between a patch and a cell are summed.
    node_of_cell : ndarray of int, shape (rows, cols)
        The node of each cell; -1 outside the landscape.
    patch_ids : ndarray of int, shape (k,)
        Patch labels; patch ``patch_ids[p]`` is node ``p``.
    shape : tuple
        Grid shape.
    neighbours, edge_rule, values_per : the settings the graph was built with.
    transform, crs : the grid's georeferencing, for :meth:`to_xarray`.
    """

    conductance: sp.csr_array
    node_of_cell: np.ndarray
    patch_ids: np.ndarray
    shape: tuple
    neighbours: int = 8
    edge_rule: str = "mean_resistance"
    values_per: str = "length"
    transform: object = None
    crs: object = None

    @property
    def n_nodes(self):
        return self.conductance.shape[0]

    @property
    def n_patches(self):
        return len(self.patch_ids)

    @property
    def n_cells(self):
        """Cells inside the landscape (patch cells included)."""
        return int((self.node_of_cell >= 0).sum())

    @property
    def n_edges(self):
        """Undirected edges between nodes (the conductance matrix is symmetric with a zero diagonal)."""
        return self.conductance.nnz // 2

    @property
    def n_pieces(self):
        """Connected pieces of the landscape."""
        return int(self.components.max()) + 1

    @cached_property
    def total_conductance(self):
        """C_x: the sum of conductances of the edges at each node."""
        return np.asarray(self.conductance.sum(axis=1)).ravel()

    @cached_property
    def components(self):
        """Connected-component label of each node (0-based), numbered in the order of each one's first node."""
        return component_labels(self.conductance)

    @cached_property
    def edges(self):
        """Each undirected edge once: (i, j, c) with i < j."""
        upper = sp.triu(self.conductance, k=1, format="coo")
        return upper.row.astype(np.int64), upper.col.astype(np.int64), upper.data

    def laplacian(self, extra_diagonal=None):
        """The weighted graph Laplacian L = diag(C) - A, as CSR.

        ``extra_diagonal`` (per node) is added to the diagonal, for a
        conductance to an outside ground (killing).
        """
        diag = self.total_conductance
        if extra_diagonal is not None:
            diag = diag + extra_diagonal
        return (sp.diags_array(diag) - self.conductance).tocsr()

    def to_raster(self, node_values, fill=np.nan, dtype=np.float32):
        """Spread per-node values back onto the grid (patch cells take their patch's value)."""
        node_values = np.asarray(node_values)
        out = np.full(self.shape, fill, dtype=dtype)
        inside = self.node_of_cell >= 0
        out[inside] = node_values[self.node_of_cell[inside]]
        return out

    def to_xarray(self, values, *, name=None, units=None):
        """Per-node values (or a full cell array) as a georeferenced xarray.DataArray (y, x).

        Cell-centre coordinates from the grid's transform, the CRS written with
        rioxarray, ``units`` in the attributes; NaN outside the landscape.
        Needs the ``xarray`` extra.
        """
        from .io.xarray import to_xarray        # the I/O layer writes the georeferencing (rioxarray)
        values = np.asarray(values)
        cells = values if values.shape == self.shape else self.to_raster(values, dtype=np.float64)
        return to_xarray(cells, self.transform, self.crs, name=name, units=units)


def build_graph(grid, patches=None, *, kind="resistance", neighbours=8, edge_rule="mean_resistance",
                values_per="length"):
    """Build the conductance graph of a grid, merging each patch into one node.

    Parameters
    ----------
    grid : Grid
        Resistance (per unit length) or conductance surface.
    patches : ndarray of int, shape (rows, cols), optional
        Patch labels, whole numbers >= 0, 0 = not a patch. Cells of one label
        need not touch. Patch cells outside the landscape are ignored.
    kind : {"resistance", "conductance"}
    neighbours : {8, 4}
    edge_rule : {"mean_resistance", "mean_conductance"}
    values_per : {"length", "square"}
        ``length`` (default): values are resistance per unit length of travel,
        C_ij = 1 / (d (r_i + r_j) / 2), so effective resistance grows with
        the cell size. ``square``: values are the sheet resistance rho of a
        continuous sheet (resistance per square), C_ij = lambda_ij / rho_ij
        with dimensionless lambda chosen so that a uniform raster conducts
        like the sheet whatever the cell size (see docs/method.md); effective
        resistance then converges as the grid is refined.

    Returns
    -------
    CellGraph

    Notes
    -----
    Cost: O(cells * neighbours) time and memory. Edges come from shifted
    views of the grid, one per neighbour direction; each end is mapped to its
    node (patch cells to their patch) and parallel edges are summed when the
    sparse matrix is assembled, which is the aggregation P^T A P with P the
    cell-to-node matrix, without forming the cell graph A.

    Examples
    --------
    A 1 x 3 strip of unit resistance, 1 m cells: two unit resistors in a row.

    >>> from landflow.grid import Grid
    >>> g = build_graph(Grid.from_array([[1.0, 1.0, 1.0]]))
    >>> g.conductance.toarray()
    array([[0., 1., 0.],
           [1., 0., 1.],
           [0., 1., 0.]])
    """
    _check_values_per(values_per)
    mask, values, edge_function = _surface(grid, kind, neighbours, edge_rule)
    cells = np.flatnonzero(mask.reshape(-1))
    labels = np.zeros(cells.size, dtype=np.int64)
    if patches is not None:
        patches = np.asarray(patches)
        if patches.shape != grid.shape:
            raise InputError(f"patch labels have shape {patches.shape}, the grid {grid.shape}.")
        labels = patches.reshape(-1)[cells]
        bad = labels < 0
        if not np.issubdtype(labels.dtype, np.integer) and labels.dtype != bool:   # floats: whole and finite?
            bad |= ~np.isfinite(labels) | (labels != np.round(labels))
        if bad.any():
            row, col = np.unravel_index(cells[np.argmax(bad)], grid.shape)
            raise InputError(f"{int(bad.sum())} patch label(s) in the landscape are not whole numbers >= 0; "
                             f"first at {grid.where(row, col)}, label {labels[np.argmax(bad)]:g}. "
                             "Label patches 1, 2, ... and other cells 0.")
        labels = labels.astype(np.int64)
    patch_ids, node = _number_nodes(labels)
    del labels
    n_nodes = int(node.max()) + 1 if node.size else 0
    node_of_cell = np.full(grid.shape, -1, dtype=np.int64)
    node_of_cell.reshape(-1)[cells] = node
    del cells, node
    merged = _edges_to_csr(values, mask, node_of_cell, n_nodes, grid, neighbours, edge_function, values_per)
    return CellGraph(merged, node_of_cell, patch_ids, grid.shape, neighbours, edge_rule, values_per,
                     grid.transform, grid.crs)


def _surface(grid, kind, neighbours, edge_rule):
    """Check the options and the values; return the node mask, the values the rule averages, and the rule.

    ``mean_resistance`` averages resistance (1/conductance on a conductance surface) and
    ``mean_conductance`` averages conductance (1/resistance on a resistance surface).
    """
    if neighbours not in NEIGHBOURS:
        raise InputError(f"neighbours must be 4 or 8, got {neighbours!r}.")
    if edge_rule not in EDGE_RULES:
        raise InputError(f"edge_rule must be one of {', '.join(EDGE_RULES)}; got {edge_rule!r}.")
    mask = landscape_mask(grid, kind)
    averages_resistance = edge_rule == "mean_resistance"
    if averages_resistance == (kind == "resistance"):
        values = grid.values
    else:
        values = np.divide(1.0, grid.values, where=mask, out=np.ones_like(grid.values))
    if averages_resistance:
        def edge_function(a, b, d):
            return 2.0 / (d * (a + b))
    else:
        def edge_function(a, b, d):
            return (a + b) / (2.0 * d)
    return mask, values, edge_function


#: How raster values are read: resistance (conductance) per unit length of travel, or per square of a
#: continuous sheet (independent of the cell size).
VALUES_PER = ("length", "square")

#: Diagonal weight of the sheet reading on square cells, 1 / (sqrt(2) (1 + sqrt(2))): the per-length rule's
#: ratio of diagonal to side conductance (1 / sqrt(2)), scaled so that a uniform sheet conducts 1 / rho.
_SHEET_DIAGONAL = 1.0 / (np.sqrt(2.0) * (1.0 + np.sqrt(2.0)))


def _sheet_factors(width, height, neighbours):
    """Dimensionless factors lambda of the sheet reading, C = lambda / rho, for side (east-west and north-south)
    and diagonal edges of cells ``width`` x ``height`` (numbers or per-row arrays).

    A lattice whose edges e (length vector Δ_e) have conductances C_e conducts like a sheet of conductivity
    sigma_xx = sum_e C_e Δx_e² / (cell area) (one term per edge of a cell's half-neighbourhood). With
    lambda_ew = h/w - 2 lambda_d, lambda_ns = w/h - 2 lambda_d and lambda_d = q min(w/h, h/w), both
    sigma_xx and sigma_yy equal 1/rho for any cell shape, with no dependence on the cell size.
    """
    if neighbours == 4:
        return height / width, width / height, 0.0
    diagonal = _SHEET_DIAGONAL * np.minimum(width / height, height / width)
    return height / width - 2 * diagonal, width / height - 2 * diagonal, diagonal


def _neighbour_steps(grid, neighbours, values_per="length"):
    """For each neighbour direction: slices ``here`` and ``there`` pairing every cell with that
    neighbour, their centre distance, and the length the edge rule divides by (the distance for
    values per length; 1 / lambda for values per square, see :func:`_sheet_factors`). Distances are
    numbers, or arrays over the ``here`` slice when the lengths change from row to row, as on a
    longitude/latitude grid (:meth:`Grid.cell_lengths`). The neighbour always has the larger flat index."""
    rows, cols = grid.shape
    if grid.is_geographic:
        ew, ns, diagonal = grid.cell_lengths()
    else:
        width, height = grid.cell_size
        ew, ns, diagonal = float(width), float(height), float(np.hypot(height, width))
    steps = [(0, 1, ew), (1, 0, ns)] + ([(1, 1, diagonal), (1, -1, diagonal)] if neighbours == 8 else [])
    if values_per == "square":
        if grid.is_geographic:      # a row's cell: ew[r] wide and (locally) ns high; between rows: the means
            row_height = np.concatenate([ns[:1], (ns[:-1] + ns[1:]) / 2, ns[-1:]]) if ns.size else np.ones(1)
            side_ew, _, _ = _sheet_factors(ew, row_height[: ew.size], neighbours)
            between = (ew[:-1] + ew[1:]) / 2
            _, side_ns, diag = _sheet_factors(between, ns, neighbours)
        else:
            side_ew, side_ns, diag = _sheet_factors(ew, ns, neighbours)
        lambdas = [side_ew, side_ns] + ([diag, diag] if neighbours == 8 else [])
    else:
        lambdas = [None] * len(steps)
    for (dr, dc, distance), lam in zip(steps, lambdas):
        here = (slice(0, rows - dr), slice(max(0, -dc), cols - max(0, dc)))
        there = (slice(dr, rows), slice(max(0, dc), cols - max(0, -dc)))
        rule_length = distance if lam is None else 1.0 / np.asarray(lam, dtype=float)
        yield here, there, _rows(distance, rows - dr, cols - abs(dc)), _rows(rule_length, rows - dr, cols - abs(dc))


def _rows(value, rows, cols):
    """A number as it is; a per-row array spread (without copying) over a slice of rows x cols."""
    if np.ndim(value):
        return np.broadcast_to(np.asarray(value, dtype=float)[:, None], (rows, cols))
    return float(value)


def _pick(distance, both):
    """The distances of the edges selected by ``both`` (a scalar stays a scalar)."""
    return distance[both] if np.ndim(distance) else distance


def _edges_to_csr(values, mask, node_of_cell, n_nodes, grid, neighbours, edge_function, values_per):
    """Symmetric node-to-node conductance matrix from the grid's neighbour pairs (no self-loops)."""
    index = np.int32 if n_nodes < 2**31 - 1 else np.int64
    nodes = node_of_cell.astype(index)                  # node numbers in the matrix's index type: no later casts
    heads, tails, conductances = [], [], []
    for here, there, _, length in _neighbour_steps(grid, neighbours, values_per):
        both = mask[here] & mask[there]
        a = nodes[here][both]
        b = nodes[there][both]
        c = edge_function(values[here][both], values[there][both], _pick(length, both))
        apart = a != b                                  # edges inside a patch vanish when it is merged
        if not apart.all():
            a, b, c = a[apart], b[apart], c[apart]
        heads.append(a)
        tails.append(b)
        conductances.append(c)
        del both, apart, a, b, c
    del nodes
    # both directions of every edge, written once into the arrays the matrix is assembled from
    rows = np.concatenate(heads + tails)
    cols = np.concatenate(tails + heads)
    del heads, tails
    data = np.concatenate(conductances + conductances)
    del conductances
    matrix = sp.coo_array((data, (rows, cols)), shape=(n_nodes, n_nodes)).tocsr()   # sums parallel edges
    del data, rows, cols
    matrix.eliminate_zeros()
    return matrix


def network_graph(source, target, conductance, *, n_nodes=None, zones=None, source_name="edge list"):
    """The conductance graph of a network (roads, rivers, habitat links), with zones merged like patches.

    A network's nodes take the place of cells: the result is a :class:`CellGraph`
    on a 1 x N "grid" whose cell j is network node j, so every analysis that
    needs no grid geometry (effective resistance, current, absorbing walks,
    corridor ranking) runs on it unchanged, and ``graph.to_raster(values)[0]``
    gives one value per network node.

    Parameters
    ----------
    source, target : array of int, shape (m,)
        The two end nodes (0 .. N-1) of each undirected edge.
    conductance : array of float, shape (m,)
        Each edge's conductance (1 / resistance), finite and > 0. Parallel
        edges are summed, as parallel conductances are.
    n_nodes : int, optional
        N; default one more than the largest node index.
    zones : array of int, shape (N,), optional
        Zone label of each node (0 = none): every zone's nodes are merged into
        one node, as a patch's cells are; edges inside a zone vanish.
    source_name : str
        Where the edges came from, for messages.

    Raises
    ------
    InputError
        A node index out of range, an edge from a node to itself, or a
        conductance that is not finite and > 0 (the edge is named).

    Examples
    --------
    A ring of four unit edges, zones at opposite corners: two paths of 2 in parallel.

    >>> import landflow as lf
    >>> g = network_graph([0, 1, 2, 3], [1, 2, 3, 0], [1.0] * 4, zones=[1, 0, 2, 0])
    >>> round(float(lf.effective_resistance(lf.patch_voltages(g))[0, 1]), 9)
    1.0
    """
    source = np.asarray(source, dtype=np.int64).ravel()
    target = np.asarray(target, dtype=np.int64).ravel()
    conductance = np.asarray(conductance, dtype=np.float64).ravel()
    if not source.size == target.size == conductance.size:
        raise InputError(f"{source_name}: source, target and conductance must have one entry per edge; got "
                         f"{source.size}, {target.size} and {conductance.size}.")
    n = int(n_nodes) if n_nodes is not None else (int(max(source.max(), target.max())) + 1 if source.size else 0)
    bad = (source < 0) | (source >= n) | (target < 0) | (target >= n)
    if bad.any():
        e = int(np.argmax(bad))
        raise InputError(f"{source_name}: edge {e} joins nodes {source[e]} and {target[e]}, but the nodes are "
                         f"numbered 0 to {n - 1}. Check the edge's end nodes.")
    loop = source == target
    if loop.any():
        e = int(np.argmax(loop))
        raise InputError(f"{source_name}: edge {e} joins node {source[e]} to itself; such an edge carries no "
                         "current. Remove it.")
    bad = ~np.isfinite(conductance) | (conductance <= 0)
    if bad.any():
        e = int(np.argmax(bad))
        raise InputError(f"{source_name}: edge {e} (nodes {source[e]}-{target[e]}) has conductance "
                         f"{float(conductance[e])!r}; an edge's conductance must be finite and > 0 (resistance finite "
                         "and > 0). Remove edges that cannot be crossed.")
    labels = np.zeros(n, dtype=np.int64) if zones is None else np.asarray(zones, dtype=np.int64).ravel()
    if labels.shape != (n,):
        raise InputError(f"{source_name}: zones must give one label per node ({n}); got {labels.size}.")
    if (labels < 0).any():
        raise InputError(f"{source_name}: node {int(np.argmax(labels < 0))} has a negative zone label; label "
                         "zones 1, 2, ... and other nodes 0.")
    patch_ids, node = _number_nodes(labels)
    n_merged = int(node.max()) + 1 if node.size else 0
    i, j = node[source], node[target]
    apart = i != j
    i, j, c = i[apart], j[apart], conductance[apart]
    index = np.int32 if n_merged < 2**31 - 1 else np.int64
    matrix = sp.coo_array((np.concatenate([c, c]), (np.concatenate([i, j]).astype(index),
                                                   np.concatenate([j, i]).astype(index))),
                          shape=(n_merged, n_merged)).tocsr()     # sums parallel edges
    matrix.eliminate_zeros()
    return CellGraph(matrix, node.reshape(1, n), patch_ids, (1, n), neighbours=0, edge_rule="network")


def _number_nodes(labels):
    """Patch cells -> patch index (0..k-1), other cells -> k, k+1, ... in cell order."""
    in_patch = np.flatnonzero(labels)           # a few cells: only their labels are sorted
    patch_ids, inverse = np.unique(labels[in_patch], return_inverse=True)
    node = np.empty(labels.size, dtype=np.int64)
    node[in_patch] = inverse.reshape(-1)
    free = np.ones(labels.size, dtype=bool)
    free[in_patch] = False
    node[free] = patch_ids.size + np.arange(labels.size - in_patch.size)
    return patch_ids, node


def component_labels(adjacency):
    """Connected-component label of each node of a symmetric adjacency matrix, 0 for the first node's piece
    and numbered in the order of each piece's first node (as scipy's undirected labelling numbers them).

    For a symmetric matrix the strongly connected components of the directed graph are the connected
    pieces, and scipy finds them (Pearce 2005, "An improved algorithm for finding the strongly connected
    components of a directed graph", technical report, as scipy's documentation cites it) without the transposed copy
    its undirected labelling makes: 0.09 s against 0.21 s at a million nodes. The labels are then put in
    first-node order, so they do not depend on the algorithm (tested against scipy's undirected ones).
    """
    count, labels = connected_components(adjacency, directed=True, connection="strong")
    first = np.full(count, labels.size, dtype=np.int64)
    np.minimum.at(first, labels, np.arange(labels.size, dtype=np.int64))
    rank = np.empty(count, dtype=labels.dtype)
    rank[np.argsort(first)] = np.arange(count, dtype=labels.dtype)
    return rank[labels]


class CellEdges(NamedTuple):
    """The edges between landscape cells before patches are merged, each once.

    Attributes
    ----------
    cell_i, cell_j : ndarray of int64
        Flat cell indices (``row * cols + col``), ``cell_i < cell_j``.
    distance : ndarray of float
        Centre distance of the two cells, map units.
    conductance : ndarray of float
        Edge conductance C_ij by the graph's edge rule.
    rule_length : ndarray of float
        The length the edge rule divides by: the distance when values are per
        length, 1 / lambda when they are per square (C_ij = rule(r_i, r_j) /
        rule_length); derivatives by a cell's value use it.
    """

    cell_i: np.ndarray
    cell_j: np.ndarray
    distance: np.ndarray
    conductance: np.ndarray
    rule_length: np.ndarray


def _check_values_per(values_per):
    if values_per not in VALUES_PER:
        raise InputError(f"values_per must be 'length' or 'square'; got {values_per!r}.")


def cell_edges(grid, *, kind="resistance", neighbours=8, edge_rule="mean_resistance", values_per="length"):
    """Every edge between two neighbouring landscape cells, before patch merging.

    :func:`build_graph` sums these edges into its nodes (a patch's internal
    edges vanish, its edges to other cells add up in parallel); analyses that
    need the single cells of an edge (a derivative by one cell's value, a
    cheapest path) use this list instead.

    Parameters
    ----------
    grid : Grid
    kind, neighbours, edge_rule, values_per : as for :func:`build_graph`.

    Returns
    -------
    CellEdges

    Notes
    -----
    Cost: O(cells * neighbours) time and memory, like :func:`build_graph`.

    Examples
    --------
    >>> from landflow.grid import Grid
    >>> e = cell_edges(Grid.from_array([[1.0, 3.0]], cell_size=2.0))
    >>> e.cell_i, e.cell_j, e.distance, e.conductance
    (array([0]), array([1]), array([2.]), array([0.25]))
    """
    _check_values_per(values_per)
    mask, values, edge_function = _surface(grid, kind, neighbours, edge_rule)
    flat = np.arange(mask.size, dtype=np.int64).reshape(mask.shape)
    parts = []
    for here, there, distance, length in _neighbour_steps(grid, neighbours, values_per):
        both = mask[here] & mask[there]
        d = np.broadcast_to(_pick(distance, both), (int(both.sum()),))
        rule = np.broadcast_to(_pick(length, both), (int(both.sum()),))
        parts.append((flat[here][both], flat[there][both], d,
                      edge_function(values[here][both], values[there][both], rule), rule))
    cell_i, cell_j, d, conductance, rule = (np.concatenate(column) for column in zip(*parts))
    order = np.lexsort((cell_j, cell_i))            # by first cell, then second: row-major
    return CellEdges(cell_i[order], cell_j[order], d[order], conductance[order], rule[order])


def nested_dissection_order(graph, *, leaf=16):
    """A fill-reducing elimination order of the graph's nodes from the cells' positions.

    Geometric nested dissection: the grid's bounding box is cut in two by one
    row or column of cells (across its longer side), each half is ordered the
    same way, recursively, and the cutting line comes after both halves; boxes
    of at most ``leaf`` cells keep their row-major order. A line of cells
    separates the halves for 4 and 8 neighbours alike. Patch nodes, which join
    cells far apart, come last.

    Parameters
    ----------
    graph : CellGraph
    leaf : int
        Largest box left undivided.

    Returns
    -------
    ndarray of int64, shape (n_nodes,)
        ``order[i]`` is the node eliminated i-th.

    Notes
    -----
    Factorising a grid Laplacian of n cells in this order costs O(n^1.5) time
    and O(n log n) memory, the least possible for 2-D grids up to constants
    (George 1973, "Nested dissection of a regular finite element mesh",
    SIAM J. Numer. Anal. 10:345, doi:10.1137/0710032). Computing the order
    costs O(n log n) with about n / leaf slice assignments.

    Examples
    --------
    A 1 x 5 strip of cells: the middle cell is the separator and comes last.

    >>> from landflow.grid import Grid
    >>> nested_dissection_order(build_graph(Grid.from_array([[1.0] * 5])), leaf=1)
    array([0, 1, 3, 4, 2])
    """
    rank = _dissection_rank(graph.shape, max(int(leaf), 1))
    k = graph.n_patches
    cells = graph.node_of_cell
    free = cells >= k
    # The ranks are distinct, so sorting the nodes by rank is placing each at its rank and closing the gaps.
    node_at = np.full(rank.size + k, -1, dtype=np.int64)
    node_at[rank[free]] = cells[free]
    node_at[rank.size:] = np.arange(k)
    return node_at[node_at >= 0]


def _dissection_rank(shape, leaf):
    """Position of every cell of a rows x cols box in the nested-dissection order.

    The order inside a box depends only on the box's shape, and the halves of the cuts come in a few
    shapes per level, so the ranks of each shape up to ``_RANK_CACHE_CELLS`` cells are computed once and
    copied, offset, into every box of that shape: a few hundred numpy operations for a million cells
    instead of one per leaf box.
    """
    rank = np.empty(shape, dtype=np.int64)
    cache = {}

    def is_leaf(h, w):
        return h * w <= leaf or min(h, w) <= 2 and max(h, w) <= leaf

    def pattern(h, w):
        """The ranks of an h x w box counted from 0, computed once per shape."""
        if (h, w) not in cache:
            out = np.empty((h, w), dtype=np.int64)
            split(out, h, w, 0)
            cache[(h, w)] = out
        return cache[(h, w)]

    def put(out, h, w, start):
        """Write the ranks of an h x w box, counted from ``start``, into the view ``out``."""
        if h <= 0 or w <= 0:
            return
        if is_leaf(h, w):
            out[...] = (start + np.arange(h * w)).reshape(h, w)
        elif h * w <= _RANK_CACHE_CELLS:
            np.add(pattern(h, w), start, out=out)
        else:
            split(out, h, w, start)

    def split(out, h, w, start):
        """Cut across the longer side: both halves first, then the cutting line."""
        if h >= w:
            m = h // 2
            put(out[:m], m, w, start)
            put(out[m + 1:], h - m - 1, w, start + m * w)
            out[m] = start + (h - 1) * w + np.arange(w)
        else:
            m = w // 2
            put(out[:, :m], h, m, start)
            put(out[:, m + 1:], h, w - m - 1, start + h * m)
            out[:, m] = start + h * (w - 1) + np.arange(h)

    put(rank, shape[0], shape[1], 0)
    return rank


#: Largest box whose nested-dissection ranks are kept by shape (64 K cells, 512 KB each).
_RANK_CACHE_CELLS = 1 << 16
