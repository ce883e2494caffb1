"""One tile task: read its window, ring it, solve, keep the core; finished tiles are kept for a rerun."""

from __future__ import annotations

import hashlib
import json
import os
import resource
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from affine import Affine

from ..analyses.regional import ring_current, shifted
from ..errors import InputError
from ..grid import Grid
from ..io._atomic import atomic_path, sha256_of
from ..io.windows import crs_from_text, read_window, write_tile

__all__ = ["TileJob", "tile_flow", "solve_tile", "solve_uniform", "settings_digest"]

#: Name of the tile folder inside the output folder (the output-folder rules treat it as landflow's own).
TILE_FOLDER = ".landflow-tiles"


@dataclass(frozen=True)
class TileJob:
    """Everything one task needs; small enough to send to any worker.

    The window is ``window`` cells from landscape cell (row0, col0); cells
    outside the landscape's ``shape`` are filled with ``buffer_value``.
    """

    source: str
    shape: tuple
    transform: tuple           # the landscape's affine transform (6 numbers)
    crs: str | None
    row0: int
    col0: int
    window: tuple
    core: tuple                # (row, col, rows, cols) of the kept core inside the window
    buffer: tuple
    ring_nodes: int
    offset: float
    buffer_value: float
    kind: str
    neighbours: int
    edge_rule: str
    values_per: str
    method: str
    tolerance: float
    name: str
    folder: str
    digest: str                # of the settings shared by every tile

    @property
    def tile_path(self):
        return Path(self.folder) / f"{self.name}.tif"

    @property
    def record_path(self):
        return Path(self.folder) / f"{self.name}.json"


def settings_digest(settings):
    """SHA-256 of the settings every tile shares (JSON with sorted keys)."""
    return hashlib.sha256(json.dumps(settings, sort_keys=True, default=str).encode()).hexdigest()


def _read(job):
    """The window's values and mask: the part inside the landscape read from the file, the rest buffer."""
    rows, cols = job.window
    values = np.full((rows, cols), job.buffer_value)
    mask = np.ones((rows, cols), bool)
    r0, c0 = max(job.row0, 0), max(job.col0, 0)
    r1, c1 = min(job.row0 + rows, job.shape[0]), min(job.col0 + cols, job.shape[1])
    part, part_mask = read_window(job.source, r0, c0, r1 - r0, c1 - c0, what=f"{job.kind} raster")
    values[r0 - job.row0:r1 - job.row0, c0 - job.col0:c1 - job.col0] = part
    mask[r0 - job.row0:r1 - job.row0, c0 - job.col0:c1 - job.col0] = part_mask
    return values, mask


def _window_grid(job, values, mask):
    t = shifted(Affine(*job.transform), job.row0, job.col0)
    # a CRS object, so that a longitude/latitude grid measures its cells in metres (Grid.cell_lengths)
    return Grid(values, mask, t, crs_from_text(job.crs), source=job.source)


def _core(job, flow):
    r, c, rows, cols = job.core
    b = job.buffer
    return flow[b[0] + r:b[0] + r + rows, b[1] + c:b[1] + c + cols]


def _solve(job, grid):
    try:
        flow, solvers = ring_current(grid, buffer_cells=job.buffer, k=job.ring_nodes, buffer_value=job.buffer_value,
                                     offset=job.offset, kind=job.kind, neighbours=job.neighbours,
                                     edge_rule=job.edge_rule, values_per=job.values_per, method=job.method,
                                     tolerance=job.tolerance)
    except InputError as exc:
        raise InputError(f"tile {job.name} (landscape rows {max(job.row0, 0)}-{job.row0 + job.window[0] - 1}, "
                         f"columns {max(job.col0, 0)}-{job.col0 + job.window[1] - 1}): {exc}") from None
    return _core(job, flow), solvers


def tile_flow(job):
    """The core of one tile: current summed over all ring-node pairs (float64, NaN outside the landscape).

    Returns
    -------
    core : ndarray
    digest : str
        SHA-256 of the window's values and mask and the shared settings: the tile's identity.
    solvers : list of Solver
    """
    values, mask = _read(job)
    core, solvers = _solve(job, _window_grid(job, values, mask))
    return core, _window_digest(job, values, mask), solvers


def _window_digest(job, values, mask):
    """A tile's identity: SHA-256 of the shared settings and of its window's values and mask."""
    return hashlib.sha256(job.digest.encode() + values.tobytes() + mask.tobytes()).hexdigest()


def _peak_bytes():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def _finished(job, digest):
    """The recorded result of this tile when it was made from the same window and settings, else None."""
    try:
        record = json.loads(job.record_path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if record.get("digest") != digest or not job.tile_path.is_file():
        return None
    return record if sha256_of(job.tile_path) == record.get("sha256") else None


def _write(job, core, digest, started, solvers):
    r, c = job.row0 + job.core[0], job.col0 + job.core[1]
    t = shifted(Affine(*job.transform), r, c)
    write_tile(job.tile_path, core, transform=t, crs=job.crs)
    record = {"tile": job.name, "digest": digest, "sha256": sha256_of(job.tile_path),
              "core": [int(r), int(c), int(job.core[2]), int(job.core[3])],
              "seconds": round(time.perf_counter() - started, 3), "peak_bytes": _peak_bytes(),
              "solvers": [s.record() for s in solvers], "worker_pid": os.getpid()}
    with atomic_path(job.record_path) as tmp:
        tmp.write_text(json.dumps(record, indent=1), encoding="utf-8")
    return record


def solve_tile(job):
    """The task each worker runs: solve one tile and write it, unless the same tile is already there.

    Returns a small dict: tile, status ("done" or "up to date"), seconds, peak_bytes, solvers.
    """
    started = time.perf_counter()
    values, mask = _read(job)
    digest = _window_digest(job, values, mask)
    record = _finished(job, digest)
    if record is not None:
        return {**record, "status": "up to date", "seconds": time.perf_counter() - started}
    core, solvers = _solve(job, _window_grid(job, values, mask))
    del values, mask
    return {**_write(job, core, digest, started, solvers), "status": "done"}


def solve_uniform(job):
    """The task for the uniform reference (``job.name`` is its file name), skipped when already there."""
    started = time.perf_counter()
    digest = hashlib.sha256(job.digest.encode() + b"uniform").hexdigest()
    record = _finished(job, digest)
    if record is not None:
        return {**record, "status": "up to date", "seconds": time.perf_counter() - started}
    rows, cols = job.window
    grid = _window_grid(job, np.full((rows, cols), job.buffer_value), np.ones((rows, cols), bool))
    core, solvers = _solve(job, grid)
    return {**_write(job, core, digest, started, solvers), "status": "done"}
