"""Run a regional study: one Dask task per tile, finished tiles kept, one COG mosaic at the end."""

from __future__ import annotations

import json
import logging
import os
import platform
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

from .. import __version__
from ..errors import ConfigError, InputError
from ..io.windows import Mosaic, raster_info, read_tile, sample_values
from ..solve import THREADS_VARIABLE, cores_per_worker
from ..study.folder import OutputFolder
from ._config import DEFAULTS, NAME, load_regional_study
from ._plan import plan_tiles, task_memory_bytes
from ._tiles import TILE_FOLDER, TileJob, settings_digest, solve_tile, solve_uniform

__all__ = ["run_regional", "check_regional", "regional_plan", "Progress"]

log = logging.getLogger("landflow")

OUTPUT = f"{NAME}.tif"
PICTURE = f"{NAME}.png"
PROGRESS_LOG = "progress.log"
REPORT = "report.md"


def _study(study):
    return load_regional_study(study) if isinstance(study, (str, Path)) else study


def _landscape(study):
    land = study.settings["landscape"]
    kind = "resistance" if land["resistance"] is not None else "conductance"
    return Path(land[kind]), kind


def regional_plan(study):
    """Validate a regional study against its input; return (study, info, plan, settings dict).

    Reads only the raster's header and, for the default buffer value, an even
    sample of its cells (at most 4 million).
    """
    study = _study(study)
    path, kind = _landscape(study)
    info = raster_info(path, what=f"{kind} raster", plain_grid_ok=study.settings["landscape"]["plain_grid_ok"])
    s = study.analyses[NAME]
    width, height = info.cell_size
    cell = min(width, height)
    buffer_width = s["buffer_width"] if s["buffer_width"] is not None else DEFAULTS["buffer_cells"] * cell
    margin = s["margin"] if s["margin"] is not None else DEFAULTS["margin_cells"] * cell
    plan = plan_tiles((info.rows, info.cols), (width, height), tile=s["tile"], margin=margin,
                      buffer_width=buffer_width, ring_nodes=s["ring_nodes"])
    perimeter = 2 * sum(plan.solved_shape) - 4
    if s["ring_nodes"] > perimeter:
        raise ConfigError(f"{study.path}: 'analyses.{NAME}.ring_nodes' = {s['ring_nodes']} is more than the "
                          f"{perimeter} cells of each window's ring; use fewer ring nodes.")
    buffer_value, how = s["buffer_value"], "given in the study"
    if buffer_value is None:
        values, exact = sample_values(path, what=f"{kind} raster")
        if values.size == 0:
            raise InputError(f"{path}: every cell of the {kind} raster is nodata; nothing to map.")
        if kind == "resistance" and np.nanmin(values) <= 0 or kind == "conductance" and np.nanmin(values) < 0:
            raise InputError(f"{path}: the {kind} raster holds values {'<= 0' if kind == 'resistance' else '< 0'}"
                             f" (smallest {np.nanmin(values):g}); resistance must be positive (use nodata for "
                             "cells outside the landscape), conductance 0 or more.")
        buffer_value = float(np.median(values[np.isfinite(values)]))
        how = "median of every cell" if exact else f"median of an even sample of {values.size:,} cells"
    return study, info, plan, {"buffer_value": buffer_value, "buffer_value_from": how,
                               "buffer_width": buffer_width, "margin": margin, "kind": kind, "path": path}


def _jobs(study, info, plan, extra, folder):
    s = study.analyses[NAME]
    land, solver = study.settings["landscape"], study.settings["solver"]
    from ..analyses.regional import ring_offset
    offset = ring_offset(s["seed"])
    # every setting that shapes a tile's numbers: the tasks' fields, and (with the version) the tiles' digest
    common = {"window": plan.window, "buffer": plan.buffer, "ring_nodes": s["ring_nodes"], "offset": offset,
              "buffer_value": extra["buffer_value"], "kind": extra["kind"], "neighbours": land["neighbours"],
              "edge_rule": land["edge_rule"], "values_per": land["values_per"], "method": solver["method"],
              "tolerance": solver["tolerance"], "transform": tuple(info.transform)[:6],
              "crs": info.crs.to_string() if info.crs else None}
    shared = {"landflow_version": __version__, **common}
    digest = settings_digest(shared)
    base = dict(common, source=str(extra["path"]), shape=plan.shape, folder=str(folder), digest=digest)
    jobs = []
    for t in plan.tiles:
        r, c = plan.core_in_window(t)
        jobs.append(TileJob(row0=t.row0, col0=t.col0, core=(r, c, t.core_rows, t.core_cols), name=t.name, **base))
    full = plan.tiles[0]
    r, c = plan.core_in_window(full)
    core = (r, c, plan.tile, plan.tile) if plan.tiled else (0, 0, plan.shape[0], plan.shape[1])
    uniform = replace(jobs[0], core=core, name="uniform_reference")
    return jobs, uniform, shared


def _gb(value):
    return f"{value / 1e9:.1f} GB"


def check_regional(study):
    """Validate a regional study and describe its tiling plan; returns the lines printed by ``landflow check``."""
    study, info, plan, extra = regional_plan(study)
    s = study.analyses[NAME]
    memory, engine = task_memory_bytes(plan, study.settings["solver"]["method"])
    rows, cols = plan.shape
    width, height = info.cell_size
    lines = [f"{study.path} is valid: a regional study ([analyses.{NAME}]) of {rows:,} x {cols:,} = "
             f"{rows * cols:,} cells of {width:g} x {height:g} map units."]
    if plan.tiled:
        gr, gc = plan.grid
        cut = [what for what, size in (("row", rows), ("column", cols)) if size % plan.tile]
        lines.append(f"tiling plan: {gr} x {gc} = {len(plan.tiles)} tiles of {plan.tile} x {plan.tile} cells, each "
                     f"widened by a margin of {extra['margin']:g} map units ({plan.margin[0]} x {plan.margin[1]} "
                     "cells) of landscape on every side"
                     + (f"; the last {' and '.join(cut)} of tiles are cut to the landscape" if cut else ""))
    else:
        lines.append(f"tiling plan: 1 tile (the landscape fits in a tile of {plan.tile} cells): solved whole, "
                     "no margin")
    sr, sc = plan.solved_shape
    lines.append(f"each task: a window of {plan.window[0]:,} x {plan.window[1]:,} cells plus a ring buffer of "
                 f"{extra['buffer_width']:g} map units ({plan.buffer[0]} x {plan.buffer[1]} cells): {sr * sc:,} "
                 f"unknowns, {s['ring_nodes']} ring nodes, {s['ring_nodes'] - 1} solves and "
                 f"{s['ring_nodes'] * (s['ring_nodes'] - 1) // 2} pairs; solver {engine}; about "
                 f"{_gb(memory)} of memory per task (one task per worker process)")
    lines.append(f"buffer value: {extra['buffer_value']:g} ({extra['buffer_value_from']}); plus one task for the "
                 "uniform reference" if s["relative_to_uniform"] else
                 f"buffer value: {extra['buffer_value']:g} ({extra['buffer_value_from']})")
    return lines


class Progress:
    """Tiles done / total, elapsed and estimated time left, on the log (and so the terminal) and in a file."""

    def __init__(self, total, log_path=None, *, every=0.0):
        self.total, self.done, self.skipped = total, 0, 0
        self.started = time.perf_counter()
        self.log_path = log_path
        self.every = every
        self._last = -1e9

    @staticmethod
    def clock(seconds):
        seconds = int(round(seconds))
        return f"{seconds // 3600:d}:{seconds // 60 % 60:02d}:{seconds % 60:02d}"

    def line(self):
        elapsed = time.perf_counter() - self.started
        finished = self.done + self.skipped
        text = f"tiles {finished}/{self.total} done"
        if self.skipped:
            text += f" ({self.skipped} up to date)"
        text += f", {self.clock(elapsed)} elapsed"
        if self.done and finished < self.total:
            left = elapsed / self.done * (self.total - finished)
            text += f", about {self.clock(left)} left"
        return text

    def event(self, status):
        if status == "up to date":
            self.skipped += 1
        else:
            self.done += 1
        now = time.perf_counter()
        if now - self._last >= self.every or self.done + self.skipped == self.total:
            self._last = now
            self.write(self.line())

    def write(self, text):
        log.info("%s", text)
        if self.log_path is not None:
            with open(self.log_path, "a", encoding="utf-8") as fh:
                fh.write(f"{time.strftime('%Y-%m-%d %H:%M:%S')} {text}\n")


def _local_cluster(workers):
    from distributed import Client, LocalCluster
    for name in ("distributed", "tornado", "bokeh"):     # the cluster's own chatter stays off the terminal
        logging.getLogger(name).setLevel(logging.ERROR)
    # each worker process's own parallel loops get its share of the cores (landflow.solve.compute_threads)
    cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=":0",
                           silence_logs=logging.ERROR, env={THREADS_VARIABLE: str(cores_per_worker(workers))})
    return Client(cluster), cluster


def _execute(tasks, *, workers, scheduler, client):
    """Run (function, job) tasks; yield each result as it finishes. workers = 0: here, one after another."""
    here = client is None and scheduler is None and workers == 0
    if not here:
        try:
            import distributed
        except ImportError:
            if client is not None or scheduler is not None or workers is not None:
                raise ConfigError("regional runs on several processes need dask.distributed; install it with "
                                  "pip install 'landflow[dask]', or run on this process alone (--workers 0).") from None
            # the default (local worker processes) without dask installed: this process, one tile after another
            log.warning("dask.distributed is not installed, so the tiles are solved in this process one after "
                        "another; pip install 'landflow[dask]' to solve them on local worker processes")
            here = True
    if here:
        for function, job in tasks:
            yield function(job)
        return
    cluster = None
    own = client is None
    if own and scheduler is not None:
        from ..study.batch import connect
        client = connect(scheduler)
    elif own:
        client, cluster = _local_cluster(workers or min(os.cpu_count() or 1, len(tasks)))
    try:
        stamp = time.time_ns()
        # a task is a pure function of its window and settings, and writes its tile atomically: when a worker
        # is lost, Dask may run it again elsewhere
        futures = [client.submit(function, job, key=f"landflow-tile-{job.name}-{stamp}", pure=False, retries=1)
                   for function, job in tasks]
        try:
            for future in distributed.as_completed(futures):
                yield future.result()
        except BaseException:
            client.cancel(futures)
            raise
    finally:
        if own:
            client.close()
            if cluster is not None:
                cluster.close()


def run_regional(study, *, workers=None, scheduler=None, client=None, stream=None):
    """Run a regional study: tiles as Dask tasks, the mosaic as one Cloud-Optimized GeoTIFF.

    Parameters
    ----------
    study : str, Path or Study
    workers : int, optional
        Local worker processes (a dask.distributed LocalCluster; default the
        number of CPU cores, at most the number of tasks). 0 solves every tile
        in this process, one after another.
    scheduler : str, optional
        Address of a dask.distributed scheduler; its workers must import
        landflow and see the input and output folder under the same paths.
        TLS certificates come from Dask's configuration, as for ``landflow batch``.
    client : distributed.Client, optional
        An already connected client.

    Returns
    -------
    dict
        The manifest.

    Notes
    -----
    Finished tiles go to ``.landflow-tiles/`` in the output folder as they
    complete, each with a record of the SHA-256 of its window's values and of
    the settings; a repeated run skips every tile whose record matches, so a
    stopped run resumes. The mosaic and manifest appear only when all tiles
    are done (landflow's output-folder protocol).
    """
    started = time.perf_counter()
    study, info, plan, extra = regional_plan(study)
    s = study.analyses[NAME]
    inputs = [study.path.resolve(), Path(extra["path"]).resolve()] if study.path else [Path(extra["path"]).resolve()]
    with OutputFolder(study.output_folder, protected=inputs, source=str(study.path)) as out:
        tiles_dir = out.folder / TILE_FOLDER
        tiles_dir.mkdir(exist_ok=True)
        jobs, uniform, shared = _jobs(study, info, plan, extra, tiles_dir)
        progress = Progress(len(jobs), tiles_dir / PROGRESS_LOG, every=0.0)
        memory, engine = task_memory_bytes(plan, study.settings["solver"]["method"])
        progress.write(f"regional run of {study.path}: {len(jobs)} tile(s) of {plan.solved_shape[0]:,} x "
                       f"{plan.solved_shape[1]:,} cells with their margin and ring, {s['ring_nodes']} ring nodes, "
                       f"about {_gb(memory)} per task ({engine})")
        tasks = ([(solve_uniform, uniform)] if s["relative_to_uniform"] else []) + [(solve_tile, j) for j in jobs]
        records = {}
        for result in _execute(tasks, workers=workers, scheduler=scheduler, client=client):
            records[result["tile"]] = result
            if result["tile"] == uniform.name:
                progress.write(f"uniform reference: {result['status']}")
            else:
                progress.event(result["status"])
        solved = time.perf_counter() - started
        progress.write("writing the mosaic")
        units = ("relative to a uniform landscape (1 = as on uniform)"
                 if s["relative_to_uniform"] else "A (sum over ring-node pairs of unit currents)")
        description = "current summed over all pairs of ring nodes around each tile" + (
            ", divided by that on a uniform landscape" if s["relative_to_uniform"] else "")
        reference = read_tile(uniform.tile_path) if s["relative_to_uniform"] else None
        target = out.staging / OUTPUT
        with Mosaic(target, *plan.shape, transform=info.transform, crs=info.crs, description=description,
                    units=units) as mosaic:
            for job in jobs:
                core = read_tile(job.tile_path)
                if reference is not None:
                    core = core / reference[:core.shape[0], :core.shape[1]]
                r0, c0 = job.row0 + job.core[0], job.col0 + job.core[1]
                mosaic.write(core, r0, c0)
        mosaic_seconds = time.perf_counter() - started - solved
        outputs = [{"file": OUTPUT, "analysis": NAME, "description": description, "units": units}]
        if study.settings["output"]["quicklooks"]:
            _picture(out.staging / PICTURE, target, relative=s["relative_to_uniform"], units=units)
            outputs.append({"file": PICTURE, "analysis": NAME, "description": "quick-look picture of the flow map",
                            "units": units})
        (out.staging / PROGRESS_LOG).write_bytes((tiles_dir / PROGRESS_LOG).read_bytes())
        outputs.append({"file": PROGRESS_LOG, "analysis": NAME, "description": "progress of the run's tiles",
                        "units": ""})
        timings = {"tiles": round(solved, 3), "mosaic": round(mosaic_seconds, 3)}
        _write_report(out.staging / REPORT, study, info, plan, extra, records, uniform.name, outputs,
                      {**timings, "total": round(time.perf_counter() - started, 3)})
        outputs.append({"file": REPORT, "analysis": NAME, "description": "a plain account of the run, with the "
                        "caution that goes with its results", "units": ""})
        manifest = _manifest(study, info, plan, extra, shared, records, uniform.name, outputs, out,
                             {**timings, "total": round(time.perf_counter() - started, 3)})
        (out.staging / "manifest.json").write_text(json.dumps(manifest, indent=1), encoding="utf-8")
        out.commit([o["file"] for o in outputs] + ["manifest.json"])
    manifest["folder"] = str(out.folder)
    return manifest


def _write_report(path, study, info, plan, extra, records, uniform_name, outputs, timings):
    """report.md of a regional run: what was solved, how, what it wrote, and the caution."""
    from ..study.run import CAUTION
    s = study.analyses[NAME]
    tiles = [r for name, r in records.items() if name != uniform_name]
    done = sum(r["status"] == "done" for r in tiles)
    width, height = info.cell_size
    lines = [f"# landflow regional run: {study.path}", "", CAUTION, "", "## Landscape", "",
             f"- {info.rows:,} x {info.cols:,} cells of {width:g} x {height:g} map units, CRS "
             f"{info.crs.to_string() if info.crs else 'none'} "
             f"({os.path.relpath(extra['path'], study.path.parent if study.path else Path.cwd())})",
             "", "## Tiles", "",
             f"- {len(plan.tiles)} tile(s) of at most {plan.tile} x {plan.tile} cells"
             + (f", each solved with a margin of {plan.margin[0]} x {plan.margin[1]} cells of landscape"
                if plan.tiled else " (the landscape fits in one tile: solved whole, without margin)"),
             f"- ring buffer of {plan.buffer[0]} x {plan.buffer[1]} cells of value {extra['buffer_value']:g} "
             f"({extra['buffer_value_from']}), {s['ring_nodes']} ring nodes, seed {s['seed']}",
             f"- {done} tile(s) solved in this run, {len(tiles) - done} up to date from an earlier run",
             "- " + ("current relative to the same ring on a uniform landscape (1 = as on uniform)"
                     if s["relative_to_uniform"] else "summed current in A for unit currents between ring nodes"),
             "", "## Outputs", "", "| file | what it holds | units |", "|---|---|---|"]
    lines += [f"| {o['file']} | {o['description']} | {o['units']} |" for o in outputs]
    lines += ["", f"Time: {timings['tiles']:.1f} s for the tiles, {timings['mosaic']:.1f} s for the mosaic, "
              f"{timings['total']:.1f} s in all. manifest.json holds the settings, input hash and versions needed "
              "to rerun this study; docs/regional.md describes the method and how far tiled maps follow untiled "
              "ones.", ""]
    path.write_text("\n".join(lines), encoding="utf-8")


def _picture(path, cog, *, relative, units):
    """A quick-look PNG from an even sample of the mosaic (its overviews), so its size does not matter."""
    from ..grid import Grid
    from ..io.windows import read_decimated
    from ..maps import MapGeometry, quicklook
    data, transform, crs = read_decimated(cog)
    grid = Grid(np.nan_to_num(data, nan=1.0), np.isfinite(data), transform, crs)
    quicklook(path, data, MapGeometry.from_grid(grid), kind="ratio" if relative else "log",
              title="Regional current" + (" relative to a uniform landscape" if relative else ""), units=units)


def _manifest(study, info, plan, extra, shared, records, uniform_name, outputs, out, timings):
    from importlib import metadata

    from ..study.run import CAUTION, _command, file_sha256
    base = study.path.parent if study.path else Path.cwd()
    tiles = [r for name, r in records.items() if name != uniform_name]
    solvers = [sv for r in records.values() for sv in r.get("solvers", [])]
    versions = {"python": platform.python_version()}
    for dep in ("numpy", "scipy", "rasterio", "dask", "distributed"):
        try:
            versions[dep] = metadata.version(dep)
        except metadata.PackageNotFoundError:
            pass
    return {
        "landflow_version": __version__,
        "run_id": out.run_id,
        "study_file": str(study.path) if study.path else None,
        "command": _command(),
        "versions": versions,
        "platform": platform.platform(),
        "inputs": [{"path": os.path.relpath(extra["path"], base), "sha256": file_sha256(extra["path"])}],
        "settings": study.resolved(),
        "landscape": {"rows": info.rows, "cols": info.cols, "cell_size": list(info.cell_size),
                      "crs": info.crs.to_string() if info.crs else None, "kind": extra["kind"]},
        "regional": {"tiles": len(plan.tiles), "tile_grid": list(plan.grid), "tile_cells": plan.tile,
                     "margin_cells": list(plan.margin), "buffer_cells": list(plan.buffer),
                     "window": list(plan.window), "unknowns_per_task": plan.unknowns,
                     "ring_offset": shared["offset"], "buffer_value": extra["buffer_value"],
                     "buffer_value_from": extra["buffer_value_from"],
                     "tiles_solved": sum(r["status"] == "done" for r in tiles),
                     "tiles_up_to_date": sum(r["status"] == "up to date" for r in tiles),
                     "peak_memory_per_worker_bytes": max((r.get("peak_bytes", 0) for r in records.values()),
                                                         default=0),
                     "tile_seconds_max": max((r.get("seconds", 0) for r in tiles), default=0)},
        "solvers": {"engines": sorted({sv["engine"] for sv in solvers}),
                    "worst_relative_residual": max((sv["worst_relative_residual"] for sv in solvers), default=0.0),
                    "systems": len(solvers)},
        "outputs": [{**o, "sha256": file_sha256(out.staging / o["file"])} for o in outputs],
        "timings_seconds": timings,
        "caution": CAUTION,
    }
