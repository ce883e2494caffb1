"""The tiling plan of a regional run: tiles, their margins, the window each task solves and its memory."""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..solve import choose_method, direct_engine, factor_bytes

__all__ = ["Tile", "TilePlan", "plan_tiles", "task_memory_bytes"]


@dataclass(frozen=True)
class Tile:
    """One task: the core it keeps and the window (core plus margin) it reads and solves.

    ``row0, col0`` is the window's top-left cell in landscape coordinates (it
    may lie outside the landscape: those cells are filled with the buffer
    value); the window is ``plan.window`` cells; the core starts at
    ``core_row0, core_col0`` (landscape) and is ``core_rows x core_cols``.
    """

    index: int
    tile_row: int
    tile_col: int
    row0: int
    col0: int
    core_row0: int
    core_col0: int
    core_rows: int
    core_cols: int

    @property
    def name(self):
        return f"r{self.tile_row:04d}_c{self.tile_col:04d}"


@dataclass(frozen=True)
class TilePlan:
    """How a landscape of ``shape`` cells is cut into tiles.

    ``window`` is the (rows, cols) every task solves before the ring buffer is
    added: tile plus margin on each side, or the whole landscape when it fits
    in one tile (no tiling, no margin).
    """

    shape: tuple
    tile: int
    margin: tuple            # cells (rows, cols) of real landscape on each side of a core
    buffer: tuple            # cells (rows, cols) of ring buffer around each window
    ring_nodes: int
    tiles: tuple

    @property
    def tiled(self):
        return len(self.tiles) > 1

    @property
    def grid(self):
        return (max(t.tile_row for t in self.tiles) + 1, max(t.tile_col for t in self.tiles) + 1)

    @property
    def window(self):
        if not self.tiled:
            return self.shape
        return (self.tile + 2 * self.margin[0], self.tile + 2 * self.margin[1])

    @property
    def solved_shape(self):
        """Cells of each task's system: the window with its ring buffer."""
        return (self.window[0] + 2 * self.buffer[0], self.window[1] + 2 * self.buffer[1])

    @property
    def unknowns(self):
        return self.solved_shape[0] * self.solved_shape[1]

    def core_in_window(self, tile):
        """Where the tile's core starts inside its window (rows, cols)."""
        return tile.core_row0 - tile.row0, tile.core_col0 - tile.col0


def _cells(width, cell):
    return int(math.ceil(width / cell - 1e-9)) if width > 0 else 0


def plan_tiles(shape, cell_size, *, tile, margin, buffer_width, ring_nodes):
    """Cut a landscape into tiles of ``tile`` x ``tile`` cells with ``margin`` map units of landscape around each.

    Parameters
    ----------
    shape : (rows, cols)
    cell_size : (width, height) in map units
    tile : int
        Cells per side of a tile's core. A landscape that fits in one tile is
        solved whole, without margin.
    margin, buffer_width : float
        Map units; rounded up to whole cells along rows (cell height) and
        columns (cell width).
    ring_nodes : int

    Examples
    --------
    >>> p = plan_tiles((2500, 1000), (30.0, 30.0), tile=1000, margin=3000.0, buffer_width=1500.0, ring_nodes=32)
    >>> len(p.tiles), p.grid, p.margin, p.window, p.solved_shape
    (3, (3, 1), (100, 100), (1200, 1200), (1300, 1300))
    """
    rows, cols = int(shape[0]), int(shape[1])
    width, height = float(cell_size[0]), float(cell_size[1])
    margin_cells = (_cells(margin, height), _cells(margin, width))
    buffer_cells = (max(1, _cells(buffer_width, height)), max(1, _cells(buffer_width, width)))
    if rows <= tile and cols <= tile:
        tiles = (Tile(0, 0, 0, 0, 0, 0, 0, rows, cols),)
        return TilePlan((rows, cols), int(tile), (0, 0), buffer_cells, int(ring_nodes), tiles)
    tiles = []
    for i in range(math.ceil(rows / tile)):
        for j in range(math.ceil(cols / tile)):
            r0, c0 = i * tile, j * tile
            tiles.append(Tile(len(tiles), i, j, r0 - margin_cells[0], c0 - margin_cells[1], r0, c0,
                              min(tile, rows - r0), min(tile, cols - c0)))
    return TilePlan((rows, cols), int(tile), margin_cells, buffer_cells, int(ring_nodes), tuple(tiles))


#: Bytes per unknown besides the factor and the potentials: the graph (CSR conductance, edge lists, node
#: numbering), the window's arrays and the solver's copies. Chosen so that the estimate stays above the peak
#: measured for one task (3.9 GB at 1.69 million unknowns, 32 ring nodes, SuperLU; estimate 4.4 GB).
OTHER_BYTES_PER_UNKNOWN = 300


def task_memory_bytes(plan, method="auto"):
    """Estimated peak memory of one tile task (bytes) and the solver it will use.

    A direct factor takes :func:`landflow.solve.factor_bytes`; multigrid about
    1 kB per unknown (docs/performance.md); the n x k potentials 8 n k bytes.
    """
    n = plan.unknowns
    k = plan.ring_nodes
    wanted = choose_method(n, k - 1) if method == "auto" else method
    engine = direct_engine() if wanted == "direct" else wanted
    solver = factor_bytes(n, engine) if engine in ("superlu", "pardiso", "cholmod") else 1000.0 * n
    return solver + 8.0 * n * k + OTHER_BYTES_PER_UNKNOWN * n, engine
