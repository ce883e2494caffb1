"""Sweeps: one study file declaring variations of its settings, expanded into named runs.

A ``[sweep]`` table maps dotted setting names to lists of values::

    [sweep]
    "landscape.suitability_shape" = [0.25, 2, 8]
    "landscape.neighbours" = [4, 8]

Every combination (here 3 x 2 = 6) becomes a run named after its values
(``suitability_shape-2_neighbours-4``) whose outputs go to its own folder
inside the study's ``output.folder``. Every run is validated before any starts.
"""

from __future__ import annotations

import copy
import itertools
import re
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..errors import ConfigError
from ..io.tables import write_csv
from .config import SECTIONS, read_study_file, study_from_dict
from .schema import close_match

__all__ = ["StudyRun", "expand_study", "sweep_keys", "write_sweep_tables", "COMPARISON_TABLE", "RUNS_TABLE"]

#: The table comparing effective resistances across a sweep's runs (long form).
COMPARISON_TABLE = "sweep_effective_resistance.csv"
#: The table listing a sweep's runs and their swept values.
RUNS_TABLE = "sweep_runs.csv"


@dataclass
class StudyRun:
    """One run of a batch: a validated study and where it came from.

    Attributes
    ----------
    name : str
        ``<study file stem>`` for a plain study, ``<stem>/<run>`` for a sweep run.
    study : Study
    source : Path
        The study file.
    sweep_folder : Path or None
        For a sweep run, the folder holding all the sweep's runs and its
        comparison tables.
    """

    name: str
    study: object
    source: Path
    sweep_folder: Path | None = None

    @property
    def folder(self):
        return self.study.output_folder

    @property
    def run_name(self):
        """The name within its sweep (the folder name), or the study's name."""
        return self.name.rsplit("/", 1)[-1]


def sweep_keys():
    """Every dotted setting name a sweep may vary."""
    from .steps import ANALYSES
    keys = [f"{s}.{k}" for s, section in SECTIONS.items() for k in section.keys if (s, k) != ("output", "folder")]
    keys += [f"analyses.{a}.{k}" for a, step in ANALYSES.items() for k in step.SETTINGS.keys]
    return keys


def expand_study(path, *, name=None):
    """Validate a study file and expand its ``[sweep]`` (if any) into runs.

    Parameters
    ----------
    path : str or Path
    name : str, optional
        The run name prefix; default the file's stem.

    Returns
    -------
    list of StudyRun
        One run for a plain study; one per combination of swept values.

    Raises
    ------
    ConfigError
        The study or one of its expansions is invalid; the message names the
        file, the key, the sweep run and the fix.
    """
    path = Path(path)
    source = str(path)
    name = name or path.stem
    raw = read_study_file(path)
    base_dir = path.resolve().parent
    if "sweep" not in raw:
        return [StudyRun(name, study_from_dict(raw, base_dir=base_dir, source=source, path=path), path)]
    table = raw.pop("sweep")
    variations = _read_sweep(table, raw, source)
    base = raw.get("output", {}).get("folder", SECTIONS["output"].keys["folder"].default)
    if not isinstance(base, str):
        raise ConfigError(f"{source}: 'output.folder' must be text, got {type(base).__name__} {base!r}.")
    sweep_folder = (base_dir / base).resolve()
    keys = list(variations)
    combos = list(itertools.product(*variations.values()))
    names = _run_names(keys, combos)
    runs = []
    for run, combo in zip(names, combos):
        study_raw = copy.deepcopy(raw)
        for key, value in zip(keys, combo):
            _set_dotted(study_raw, key, value, source)
        study_raw.setdefault("output", {})["folder"] = str(sweep_folder / run)
        described = ", ".join(f"{k} = {v!r}" for k, v in zip(keys, combo))
        study = study_from_dict(study_raw, base_dir=base_dir, source=f"{source} (sweep run '{run}': {described})",
                                path=path)
        study.variation = {key: _resolved(study, key) for key in keys}
        runs.append(StudyRun(f"{name}/{run}", study, path, sweep_folder))
    if "effective_resistance" not in runs[0].study.analyses:
        raise ConfigError(f"{source}: a sweep compares effective resistance between its runs; add the table "
                          "[analyses.effective_resistance] to the study.")
    return runs


def _read_sweep(table, raw, source):
    if not isinstance(table, dict) or not table:
        raise ConfigError(f"{source}: [sweep] must be a table of setting = [values], for example "
                          f"\"landscape.neighbours\" = [4, 8]; got {table!r}.")
    flat = {}

    def walk(prefix, node):
        for key, value in node.items():
            dotted = f"{prefix}.{key}" if prefix else key
            if isinstance(value, dict):
                walk(dotted, value)
            else:
                flat[dotted] = value

    walk("", table)
    known = sweep_keys()
    for key, values in flat.items():
        if key == "output.folder":
            raise ConfigError(f"{source}: [sweep] cannot vary 'output.folder': every run already gets its own "
                              "folder inside it, named after its values.")
        if key not in known:
            raise ConfigError(f"{source}: [sweep] names an unknown setting '{key}'.{close_match(key, known)} "
                              "Sweep keys are dotted names such as 'landscape.neighbours' or "
                              "'analyses.current_density.pair_current_maps'; see docs/study-files.md.")
        parts = key.split(".")
        if parts[0] == "analyses" and parts[1] not in raw.get("analyses", {}):
            raise ConfigError(f"{source}: [sweep] varies '{key}', but the study does not request "
                              f"[analyses.{parts[1]}]. Add that table or drop the key from [sweep].")
        if not isinstance(values, list):
            raise ConfigError(f"{source}: 'sweep.{key}' must be a non-empty list of values to try, got "
                              f"{type(values).__name__} {values!r}. Write for example \"{key}\" = [{values!r}].")
        if not values:
            raise ConfigError(f"{source}: 'sweep.{key}' must be a non-empty list of values to try, got an empty "
                              f"list. List the values, or remove the key from [sweep].")
        if len(set(map(repr, values))) != len(values):
            raise ConfigError(f"{source}: 'sweep.{key}' lists a value twice ({values!r}); each run must differ.")
    return flat


def _resolved(study, key):
    parts = key.split(".")
    value = study.analyses[parts[1]][parts[2]] if parts[0] == "analyses" else study.settings[parts[0]][parts[1]]
    return str(value) if isinstance(value, Path) else value


def _set_dotted(raw, key, value, source):
    *tables, leaf = key.split(".")
    node = raw
    for t in tables:
        node = node.setdefault(t, {})
        if not isinstance(node, dict):
            raise ConfigError(f"{source}: [{'.'.join(tables)}] must be a table to vary '{key}'; "
                              f"got {type(node).__name__} {node!r}.")
    node[leaf] = value


def _label(value):
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return format(value, "g")
    if isinstance(value, str):
        return Path(value).stem if ("/" in value or "." in value) else value
    return str(value)


def _run_names(keys, combos):
    leaves = [k.rsplit(".", 1)[-1] for k in keys]
    if len(set(leaves)) != len(leaves):
        leaves = [k.replace(".", "-") for k in keys]
    names = []
    for combo in combos:
        name = "_".join(f"{leaf}-{_label(v)}" for leaf, v in zip(leaves, combo))
        names.append(re.sub(r"[^A-Za-z0-9._+-]+", "-", name))
    seen = {}
    unique = []
    for n in names:
        seen[n] = seen.get(n, 0) + 1
        unique.append(n if names.count(n) == 1 else f"{n}-{seen[n]}")
    return unique


def write_sweep_tables(runs, statuses):
    """Write the comparison tables of each sweep among ``runs``.

    Parameters
    ----------
    runs : list of StudyRun
    statuses : dict
        ``{run name: status}``; runs whose status is "done" or "skipped"
        (up to date) have outputs to compare.

    Returns
    -------
    list of Path
        The comparison tables written.

    Notes
    -----
    ``sweep_effective_resistance.csv`` has one row per run and patch pair:
    run, patch_a, patch_b, resistance. ``sweep_runs.csv`` lists each run, its
    status, folder and swept values. Runs that failed are listed with their
    status and left out of the comparison.
    """
    written = []
    groups = {}
    for run in runs:
        if run.sweep_folder is not None:
            groups.setdefault(run.sweep_folder, []).append(run)
    for folder, members in groups.items():
        rows, frames = [], []
        for run in members:
            status = statuses.get(run.name, "not run")
            rows.append({"run": run.run_name, "status": status, "folder": str(run.folder),
                         **run.study.variation})
            table = run.folder / "effective_resistance.csv"
            if status in ("done", "skipped") and table.exists():
                frame = pd.read_csv(table, usecols=["patch_a", "patch_b", "resistance"])
                frame.insert(0, "run", run.run_name)
                frames.append(frame)
        folder.mkdir(parents=True, exist_ok=True)
        write_csv(folder / RUNS_TABLE, pd.DataFrame(rows))
        comparison = (pd.concat(frames, ignore_index=True) if frames
                      else pd.DataFrame(columns=["run", "patch_a", "patch_b", "resistance"]))
        write_csv(folder / COMPARISON_TABLE, comparison)
        written.append(folder / COMPARISON_TABLE)
    return written
