"""Run one study: read inputs, build the graph, run each requested analysis, write outputs."""

from __future__ import annotations

import json
import logging
import os
import platform
import sys
import time
import warnings
from contextlib import contextmanager
from functools import cached_property
from importlib import metadata
from pathlib import Path

import numpy as np

from .. import __version__, interrupt
from ..errors import ConfigError, InputError
from ..graph import build_graph
from ..grid import Grid
from ..io._atomic import sha256_of
from ..io.rasters import read_aligned, read_grid, write_geotiff
from ..io.sites import patch_weight_from_raster, read_patch_points, read_patch_raster
from ..io.tables import write_csv
from .config import Study, aligned_inputs, is_network, load_study
from .folder import OutputFolder, check_output_folder, is_landflow_manifest

__all__ = ["run_study", "check_study", "verify_folder", "protected_paths", "RunContext", "CAUTION"]

log = logging.getLogger("landflow")

CAUTION = ("These are model outputs. They depend on the resistance values and on the assumptions of the "
           "random-walk and circuit models. Use them for decision support alongside field evidence, local "
           "regulation and licensed professional practice, not as a substitute for them.")

VOLTAGES_PURPOSE = "patch voltages (effective resistance, current)"
WALK_PURPOSE = "absorbing walk (every patch absorbing)"

_DEPENDENCIES = ("numpy", "scipy", "pandas", "rasterio", "scikit-image", "pyamg", "matplotlib", "jinja2",
                 "geopandas", "pyogrio", "pyproj", "shapely")


#: Modules that the stages after the solves import (the maps, the report page's charts and template, the
#: vector layers): :func:`imported_meanwhile` loads them while a solver works.
LATER_MODULES = ("matplotlib.figure", "matplotlib.backends.backend_agg", "matplotlib.colors", "matplotlib.ticker",
                 "matplotlib.patches", "scipy.cluster.hierarchy", "scipy.spatial.distance", "jinja2", "geopandas",
                 "shapely", "pyogrio", "rasterio.features")


@contextmanager
def imported_meanwhile(modules):
    """Import ``modules`` on a second thread while a direct engine factorises in the block.

    A factorisation spends seconds in compiled code that releases the GIL (SuperLU, CHOLMOD, Pardiso) on
    one core, and the imports of the later stages take about a second on the other (matplotlib alone 0.6
    s, measured on the 1000 x 1000 benchmark). The thread starts when the engine takes over
    (:func:`landflow.solve.when_engine_starts`), not before: the numpy work that builds the system would
    share the GIL with it. Leaving the block waits for the thread, so that no import is half done when the
    run imports the same modules itself. A module that fails to import is left for the stage that needs
    it, which then reports the error. Without a direct factorisation (multigrid) nothing is imported ahead.
    """
    import importlib
    import threading

    from ..solve import when_engine_starts

    def load():
        for name in modules:
            try:
                importlib.import_module(name)
            except Exception:                       # noqa: BLE001 - reported by the stage that imports it
                log.debug("could not import %s ahead of time", name, exc_info=True)

    thread = threading.Thread(target=load, name="landflow-imports", daemon=True)
    try:
        with when_engine_starts(thread.start):
            yield
    finally:
        if thread.ident is not None:
            thread.join()


class RunContext:
    """What an analysis step sees: inputs, the graph, shared solves, and an output writer.

    Steps write only through :meth:`write_raster`, :meth:`write_table` and
    :meth:`quicklook`, which record every output for the manifest.
    """

    is_network = False

    def __init__(self, study, folder):
        self.study = study
        self.folder = Path(folder)
        self.outputs = []
        self.tables = {}
        self.warnings = []
        self.timings = {}
        self.stages = []         # (name, start, end) in seconds since the context was made, for the timeline
        self.step = None         # the analysis now running: outputs and shared solves record it
        self.summary_keys = {}   # which key numbers each analysis added
        self._started = time.perf_counter()
        self.inputs = {}
        self._aligned = {}
        self._align = aligned_inputs(study)
        self.alignments = []
        self.summary = {}
        self.solvers = []
        self.shared_users = {}
        self._load()

    # -- inputs ---------------------------------------------------------------
    def _load(self):
        land = self.study.settings["landscape"]
        self.from_suitability = land["suitability"] is not None
        kind = "conductance" if land["conductance"] is not None else "resistance"
        with self.timed("read inputs"):
            if self.from_suitability:
                self.grid = _grid_from_suitability(read_grid(self._input(land["suitability"]),
                                                             what="suitability raster",
                                                             plain_grid_ok=land["plain_grid_ok"]), land)
            else:
                self.grid = read_grid(self._input(land[kind]), what=f"{kind} raster",
                                      plain_grid_ok=land["plain_grid_ok"])
            self.kind = kind
            spec = self.study.settings["patches"]
            if spec["raster"] is not None:
                self.patches = read_patch_raster(self._input(spec["raster"]), self.grid,
                                                 align=self._align.get(str(spec["raster"])), record=self.alignments)
            elif spec["features"] is not None:
                from ..io.vectors import read_patch_features
                self.patches = read_patch_features(self._input(spec["features"]), self.grid, layer=spec["layer"],
                                                   id_column=spec["id_column"] or "id",
                                                   weight_column=spec["weight_column"],
                                                   all_touched=spec["all_touched"])
            else:
                self.patches = read_patch_points(self._input(spec["points"]), self.grid,
                                                 weight_column=spec["weight_column"], crs=spec["crs"])
            if spec["weight_raster"] is not None:
                self.patches.weight = patch_weight_from_raster(
                    self._input(spec["weight_raster"]), self.grid, self.patches,
                    align=self._align.get(str(spec["weight_raster"])), record=self.alignments)
        with self.timed("build graph"):
            self.graph = build_graph(self.grid, self.patches.labels, kind=kind,
                                     neighbours=land["neighbours"], edge_rule=land["edge_rule"],
                                     values_per=land["values_per"])
        self._check_patches()

    def _input(self, path):
        """Record an input file's SHA-256 for the manifest and return its path."""
        path = Path(path)
        if str(path) not in self.inputs:
            self.inputs[str(path)] = file_sha256(path)
        return path

    def read_aligned(self, path, what):
        """Read another raster that must lie on the landscape's grid (mortality, ...), once per run."""
        key = str(path)
        if key not in self._aligned:
            self._aligned[key] = read_aligned(self._input(path), self.grid, what=what,
                                              align=self._align.get(key), record=self.alignments)
        return self._aligned[key]

    def read_landscape_like(self, path, key):
        """Another landscape raster on the grid (a what-if), read as the study's own landscape is read:
        of the same kind, and through the same transform when the landscape is a suitability raster."""
        what = f"changed {'suitability' if self.from_suitability else self.kind} raster ('{key}')"
        grid = self.read_aligned(path, what)
        return _grid_from_suitability(grid, self.study.settings["landscape"]) if self.from_suitability else grid

    def _check_patches(self):
        wanted = self.patches.ids
        found = self.graph.patch_ids
        lost = np.setdiff1d(wanted, found)
        if lost.size:
            raise InputError(f"{self.patches.source}: patch(es) {', '.join(map(str, lost))} lie entirely on cells "
                             f"outside the landscape of {self.grid.source} (nodata or barrier). "
                             "Move them or fix the landscape raster.")
        if found.size < 2:
            raise InputError(f"{self.patches.source}: found {found.size} patch(es); pairwise analyses need at "
                             "least two. Check the labels (0 means no patch).")
        comp = self.graph.components[: found.size]
        if np.unique(comp).size > 1:
            groups = [", ".join(map(str, found[comp == c])) for c in np.unique(comp)]
            self.warn("the landscape falls apart into pieces that no walk can cross; patches in different "
                      f"pieces have infinite effective resistance. Groups: {' | '.join(groups)}")

    def where(self, row, col):
        """How messages name a cell: row/col and map coordinates."""
        return self.grid.where(row, col)

    @property
    def walk_graph(self):
        """The graph the absorbing walk hops on (the circuit's own graph on a raster)."""
        return self.graph

    def landscape_record(self):
        """The manifest's account of the landscape."""
        graph = self.graph
        return {"rows": graph.shape[0], "cols": graph.shape[1],
                "cell_size": list(self.grid.cell_size),
                "cell_size_metres": [round(v, 6) for v in self.grid.cell_size_metres()],
                "geographic": self.grid.is_geographic,
                "crs": self.grid.crs.to_string() if self.grid.crs else None,
                "cells": graph.n_cells, "nodes": graph.n_nodes, "edges": graph.n_edges,
                "patches": [int(p) for p in graph.patch_ids], "pieces": graph.n_pieces,
                **({"patch_names": {str(int(p)): self.patches.name_of(p) for p in graph.patch_ids}}
                   if self.patches.names else {})}

    @cached_property
    def patch_weight(self):
        """Per-patch weight in graph order, or None; warns once when every weight is 0."""
        s = self.patches.weight
        if s is None:
            return None
        weight = np.array([s[int(p)] for p in self.graph.patch_ids])
        if not np.any(weight > 0):
            spec = self.study.settings.get("patches") or {}
            key = ("zones.weight_column" if self.is_network else "patches.weight_raster"
                   if spec.get("weight_raster") is not None else "patches.weight_column")
            self.warn(f"every patch weight from '{key}' is 0, so every pair weighs 0 and weighted maps and sums "
                      "are all 0. Check the weights, or set 'use_patch_weights = false' in the analyses.")
        return weight

    # -- shared solves -------------------------------------------------------
    @property
    def voltages(self):
        """Patch voltages (k - 1 solves), computed once and shared by every step."""
        self._note_use(VOLTAGES_PURPOSE)
        return self._voltages

    @cached_property
    def _voltages(self):
        from ..analyses.resistance import patch_voltages
        solver = self.study.settings["solver"]
        with self.timed("solve"), imported_meanwhile(LATER_MODULES):
            return patch_voltages(self.graph, method=solver["method"], tolerance=solver["tolerance"],
                                  progress=log.info)

    @cached_property
    def least_cost(self):
        """Least-cost distances and routes between patches on the landscape's cell edges, shared by every step."""
        from ..analyses.least_cost import least_cost
        from ..graph import cell_edges
        land = self.study.settings["landscape"]
        with self.timed("least-cost search"):
            edges = cell_edges(self.grid, kind=self.kind, neighbours=land["neighbours"], edge_rule=land["edge_rule"],
                                     values_per=land["values_per"])
            return least_cost(self.graph, edges)

    @cached_property
    def mortality(self):
        """Per-cell death probability per step from [mortality] (checked), or None."""
        spec = self.study.settings.get("mortality") or {}
        raster, rate = spec.get("raster"), spec.get("death_per_resistance")
        from ..analyses.absorption import check_mortality, mortality_from_resistance
        if raster is not None:
            grid = self.read_aligned(raster, "mortality raster")
            values = np.where(grid.mask, grid.values, 0.0)
            return check_mortality(values, self.graph, source=str(raster), where=self.grid.where)
        if rate is not None:
            inside = self.graph.node_of_cell >= 0
            values = np.where(inside, self.grid.values, 1.0)
            resistance = values if self.kind == "resistance" else 1.0 / values
            return mortality_from_resistance(np.where(inside, resistance, 0.0), rate)
        return None

    @property
    def absorbing_walk(self):
        """The walk with every patch absorbing and the study's mortality, shared by every step.

        Its system is factorised on first use only: a step that needs only other
        absorbing sets (hitting maps of pairs) never pays for it.
        """
        self._note_use(WALK_PURPOSE)
        return self._absorbing_walk

    @cached_property
    def _absorbing_walk(self):
        from ..analyses.absorption import absorbing_walk
        solver = self.study.settings["solver"]
        spec = self.study.settings.get("mortality") or {}
        with self.forward_warnings(), imported_meanwhile(LATER_MODULES):
            return absorbing_walk(self.walk_graph, self.mortality, method=solver["method"], tolerance=solver["tolerance"],
                                  source=str(spec.get("raster") or "mortality"), where=self.grid.where)

    def _note_use(self, purpose):
        users = self.shared_users.setdefault(purpose, [])
        if self.step is not None and self.step not in users:
            users.append(self.step)

    def add_solvers(self, purpose, solvers):
        """Record solvers a step prepared, with what they were for, for the manifest (each once)."""
        known = {id(s) for _, s in self.solvers}
        self.solvers += [(purpose, s) for s in solvers if s is not None and id(s) not in known]
        self._note_use(purpose)

    def solver_records(self):
        """Every factorised system of the run: what it was for, which steps shared it, the engine's record."""
        found = []
        if "_voltages" in self.__dict__:
            found += [(VOLTAGES_PURPOSE, s) for s in self._voltages.solvers]
        if "_absorbing_walk" in self.__dict__ and self._absorbing_walk.factorised:
            found.append((WALK_PURPOSE, self._absorbing_walk.solver))
        found += self.solvers
        return [{"purpose": purpose, "used_by": self.shared_users.get(purpose, []), **s.record()}
                for purpose, s in found if s is not None]

    @contextmanager
    def forward_warnings(self):
        """Record landflow warnings raised inside the block in the run's warnings."""
        from ..analyses.absorption import StrandedWalkWarning
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", StrandedWalkWarning)
            yield
        for w in caught:
            if issubclass(w.category, StrandedWalkWarning):
                self.warn(str(w.message))
            else:
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)

    # -- outputs -------------------------------------------------------------
    def warn(self, message):
        log.warning(message)
        self.warnings.append(message)

    def timed(self, name):
        return _Timer(self.timings, name, self.stages, self._started)

    def _record(self, name, description, units):
        interrupt.check()
        self.outputs.append({"file": name, "description": description, "units": units,
                             **({"analysis": self.step} if self.step else {})})
        return self.folder / name

    def write_raster(self, name, values, *, description, units, per_node=True):
        """Write per-node values (spread over patch cells) or a full cell array as GeoTIFF."""
        path = self._record(name, description, units)
        path.parent.mkdir(parents=True, exist_ok=True)
        array = self.graph.to_raster(values) if per_node else values
        with _naming_the_output(name):
            write_geotiff(path, array, self.grid, description=description, units=units)
        return array

    def write_table(self, name, table, *, description, units="see docs/outputs.md", **kwargs):
        path = self._record(name, description, units)
        self.tables[name] = table
        with _naming_the_output(name):
            write_csv(path, with_patch_names(table, self.patches.names), **kwargs)

    def quicklook(self, name, array, *, title, units, log_scale=True, categorical=False, kind=None,
                  backdrop=False, marks=None, mark_label="landscape changed here", class_names=None,
                  class_colours=None):
        """Save a map of a cell array (PNG) and record it. ``kind`` is one of :data:`landflow.maps.KINDS`;
        without it, ``categorical`` means "classes" and ``log_scale`` "log" (else "magnitude").
        ``backdrop`` lays the landscape's resistance in faint grey under a sparse layer; ``marks`` (bool
        cells) are outlined, such as the cells a what-if changed."""
        if not self.study.settings["output"]["quicklooks"]:
            return
        from ..maps import MapGeometry, quicklook
        kind = kind or ("classes" if categorical else "log" if log_scale else "magnitude")
        path = self._record(name, f"quick-look picture: {title}", units)
        path.parent.mkdir(parents=True, exist_ok=True)
        resistance = None
        if backdrop:
            values = np.where(self.grid.mask, self.grid.values, np.nan)
            resistance = values if self.kind == "resistance" else 1.0 / values
        quicklook(path, array, MapGeometry.from_grid(self.grid), kind=kind, title=title, units=units,
                  patches=self.patches.labels, patch_names=getattr(self.patches, "names", None),
                  landscape=self.graph.node_of_cell >= 0, backdrop=resistance, marks=marks,
                  mark_label=mark_label, class_names=class_names, class_colours=class_colours)


#: Table columns that hold patch ids; with text ids each gets a ``<column>_name`` column beside it.
PATCH_COLUMNS = ("patch", "patch_a", "patch_b", "release_patch", "arrival_patch")


def with_patch_names(table, names):
    """``table`` with the text id of each patch beside every patch-id column (and index), when ids are text."""
    if not names:
        return table
    table = table.copy()
    lookup = {int(k): v for k, v in names.items()}

    def name(value):
        try:
            return lookup.get(int(value), "")
        except (TypeError, ValueError):
            return ""
    if table.index.name in PATCH_COLUMNS:
        table.index = table.index.map(name).rename(f"{table.index.name}_name")
        table.columns = [name(c) if isinstance(c, (int, np.integer)) else c for c in table.columns]
    for col in [c for c in table.columns if c in PATCH_COLUMNS]:
        table.insert(table.columns.get_loc(col) + 1, f"{col}_name", table[col].map(name))
    return table


@contextmanager
def _naming_the_output(name):
    """Re-raise a failed write (disk full, GDAL's bare "Write failed") naming the output and the fix."""
    try:
        yield
    except OSError as exc:
        reason = exc.strerror or str(exc) or type(exc).__name__
        raise OSError(exc.errno, f"could not write the output {name}: {reason}. Free space on the output folder's "
                      "disk (or check its permissions) and run again; the earlier results are untouched") from None


def file_sha256(path):
    """The SHA-256 of a file's bytes as hex, read in 1 MB chunks (the manifest's input hashes)."""
    if not Path(path).is_file():
        raise InputError(f"{path}: not a regular file (a folder, device or pipe); give the path of a file.")
    return sha256_of(path)


def _grid_from_suitability(grid, land):
    """The resistance grid made from a suitability grid by the study's transform."""
    from ..analyses.suitability import resistance_from_suitability
    transform = land["suitability_transform"]
    resistance = resistance_from_suitability(
        grid.values, scale=land["suitability_scale"], transform=transform,
        shape=land["suitability_shape"] if transform != "linear" else None,
        max_resistance=land["suitability_max_resistance"], mask=grid.mask, where=grid.where,
        source=grid.source)
    return Grid(resistance, grid.mask, grid.transform, grid.crs, source=grid.source, nodata=grid.nodata)


class _Timer:
    def __init__(self, timings, name, stages=None, origin=0.0):
        self.timings, self.name, self.stages, self.origin = timings, name, stages, origin

    def __enter__(self):
        self.start = time.perf_counter()
        log.info("%s ...", self.name)

    def __exit__(self, *exc):
        seconds = time.perf_counter() - self.start
        self.timings[self.name] = round(self.timings.get(self.name, 0.0) + seconds, 3)
        if self.stages is not None:
            self.stages.append({"stage": self.name, "start": round(self.start - self.origin, 3),
                                "end": round(self.start - self.origin + seconds, 3)})
        if exc[0] is None:
            log.info("%s done in %.1f s", self.name, seconds)


def check_study(study):
    """Validate a study and its inputs without solving; returns a short summary dict.

    The output folder is checked by the rules a run applies (see
    :mod:`landflow.study.folder`), and leftovers of stopped runs in it are repaired.
    """
    study = study if isinstance(study, Study) else load_study(study)
    _check_writable(study)
    folder = check_output_folder(study.output_folder, protected=protected_paths(study), source=_source(study))
    if folder.exists():
        with OutputFolder(folder, protected=protected_paths(study), source=_source(study), stage=False):
            pass
    ctx = make_context(study, study.output_folder)
    _check_steps(ctx)
    ctx.patch_weight  # reads the weights and warns, as a run does, when every one is 0
    graph = ctx.graph
    return {"cells": graph.n_cells, "nodes": graph.n_nodes,
            "patches": graph.n_patches, "pieces": graph.n_pieces,
            "analyses": list(study.analyses), "warnings": ctx.warnings,
            **({"network_edges": ctx.network.n_edges} if ctx.is_network else {})}


def make_context(study, folder):
    """The run context of a study: a raster landscape's, or a network's (:mod:`landflow.study.network`)."""
    if is_network(study):
        from .network import NetworkContext
        return NetworkContext(study, folder)
    return RunContext(study, folder)


def _source(study):
    return str(study.path) if study.path else "study"


def protected_paths(study):
    """The study file and every input file it names: an output folder may neither be nor contain them."""
    found = [study.path] if study.path else []

    def walk(value):
        if isinstance(value, Path):
            found.append(value)
        elif isinstance(value, dict):
            for v in value.values():
                walk(v)
        elif isinstance(value, (list, tuple)):
            for v in value:
                walk(v)
    for section, keys in study.settings.items():
        walk({k: v for k, v in keys.items() if (section, k) != ("output", "folder")})
    walk(study.analyses)
    return found


def _check_steps(ctx):
    """Let each requested step validate its settings against the inputs before any step runs."""
    from .steps import ANALYSES
    from .steps._patch_settings import with_patch_codes
    ctx.mortality  # reads and checks the [mortality] input, if any
    ctx.step_settings = {name: with_patch_codes(ANALYSES[name].SETTINGS, settings, ctx.patches, f"analyses.{name}",
                                               ctx.study.path)
                         for name, settings in ctx.study.analyses.items()}
    for name, settings in ctx.step_settings.items():
        check = getattr(ANALYSES[name], "check", None)
        if check is not None:
            check(ctx, settings)


def _check_writable(study):
    folder = study.output_folder
    if folder.exists() and not folder.is_dir():
        raise ConfigError(f"{study.path}: the output folder '{folder}' ('output.folder') is an existing file, "
                          "not a folder. Choose another folder or move the file away.")
    probe = folder.parent
    while not probe.exists():
        probe = probe.parent
    if not probe.is_dir():
        raise ConfigError(f"{study.path}: the output folder '{folder}' ('output.folder') cannot be made: "
                          f"{probe} is a file, not a folder. Choose another folder.")
    if not os.access(probe, os.W_OK | os.X_OK) or (folder.exists() and not os.access(folder, os.W_OK)):
        raise ConfigError(f"{study.path}: the output folder '{folder}' ('output.folder') cannot be written "
                          f"({probe} is not writable). Choose another folder.")


def run_study(study):
    """Run a study and write its outputs.

    Parameters
    ----------
    study : Study, str or Path
        A validated study or the path of a study TOML file.

    Returns
    -------
    dict
        The manifest (also written as ``manifest.json``); ``manifest["folder"]``
        is the output folder.

    Notes
    -----
    Outputs are written into a staging folder inside the output folder and
    replace the previous run's outputs only when every step succeeded; files
    that landflow did not write are never touched. The protocol, and how a
    stopped run is repaired, is described in :mod:`landflow.study.folder`.
    """
    from .steps import ANALYSES

    study = study if isinstance(study, Study) else load_study(study)
    _check_writable(study)
    started = time.perf_counter()
    with OutputFolder(study.output_folder, protected=protected_paths(study), source=_source(study)) as out:
        ctx = make_context(study, out.staging)
        _check_steps(ctx)
        if ctx.from_suitability:
            ctx.write_raster("resistance_from_suitability.tif", np.where(ctx.grid.mask, ctx.grid.values, np.nan),
                             per_node=False, units="resistance per map unit",
                             description="resistance made from the suitability raster by the study's transform")
        for name, settings in ctx.step_settings.items():
            ctx.step, before = name, set(ctx.summary)
            with ctx.timed(name):
                ANALYSES[name].run(ctx, settings)
            ctx.summary_keys[name] = [k for k in ctx.summary if k not in before]
        ctx.step = None
        if ctx.is_network:
            from .network import write_network_outputs
            with ctx.timed("network layers"):
                write_network_outputs(ctx)
        elif study.settings["output"]["map_layers"]:
            from .vector_layers import write_vector_layers
            with ctx.timed("vector layers"):
                write_vector_layers(ctx)
        manifest = _manifest(ctx, time.perf_counter() - started, run_id=out.run_id)
        from ..report import write_reports
        write_reports(out.staging, manifest)
        with open(out.staging / "manifest.json", "w", encoding="utf-8") as fh:
            json.dump(manifest, fh, indent=2, sort_keys=False)
            fh.write("\n")
        interrupt.check()
        out.commit([item["file"] for item in manifest["outputs"]] + ["manifest.json"])
    final = out.folder
    manifest["folder"] = str(final)
    log.info("results written to %s", final)
    return manifest


def verify_folder(folder):
    """Compare every output a results folder's manifest lists with its SHA-256.

    Returns
    -------
    list of str
        One line per output that is missing or changed; empty when all match.

    Raises
    ------
    InputError
        The folder holds no landflow manifest.
    """
    folder = Path(folder)
    manifest_path = folder / "manifest.json"
    if not is_landflow_manifest(manifest_path):
        raise InputError(f"{folder}: no landflow manifest.json there; give the output folder of a finished run.")
    manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    problems = []
    for item in manifest["outputs"]:
        path = folder / item["file"]
        if not path.is_file():
            problems.append(f"missing: {item['file']}")
        elif "sha256" in item and file_sha256(path) != item["sha256"]:
            problems.append(f"changed since the run: {item['file']}")
    return problems


def _command():
    """The command line that started this run (``landflow ...`` or ``python -m landflow ...``), or None."""
    if not sys.argv:
        return None
    first = Path(sys.argv[0])
    if first.name == "__main__.py" and first.parent.name == "landflow":
        return " ".join(["python -m landflow", *sys.argv[1:]])
    return " ".join(sys.argv) if first.stem == "landflow" else None


def _manifest(ctx, seconds, run_id=None):
    versions = {"python": platform.python_version()}
    for dep in _DEPENDENCIES:
        try:
            versions[dep] = metadata.version(dep)
        except metadata.PackageNotFoundError:
            pass
    solvers = ctx.solver_records()
    base = ctx.study.path.parent if ctx.study.path else Path.cwd()
    outputs = [{**item, "sha256": file_sha256(ctx.folder / item["file"])} for item in ctx.outputs]
    return {
        "landflow_version": __version__,
        "run_id": run_id,
        "study_file": str(ctx.study.path) if ctx.study.path else None,
        "command": _command(),
        "versions": versions,
        "platform": platform.platform(),
        "inputs": [{"path": os.path.relpath(p, base), "sha256": h} for p, h in ctx.inputs.items()],
        "settings": ctx.study.resolved(),
        "sweep": dict(ctx.study.variation) or None,
        "landscape": ctx.landscape_record(),
        "alignment": ctx.alignments,
        "solvers": solvers,
        "outputs": outputs,
        "summary": ctx.summary,
        "summary_by_analysis": ctx.summary_keys,
        "warnings": ctx.warnings,
        "timings_seconds": {**ctx.timings, "total": round(seconds, 3)},
        "stages": ctx.stages,
        "caution": CAUTION,
    }
