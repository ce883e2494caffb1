"""The study-file reference (docs/study-files.md), generated from the schema.

Regenerate after changing any Key, Section or analysis step::

    python -m landflow.study.reference > docs/study-files.md

A test fails when the committed file differs from :func:`render`.
"""

from __future__ import annotations

import sys

from .config import SECTIONS
from .schema import REQUIRED

__all__ = ["render", "toml_value"]

COMMAND = "python -m landflow.study.reference > docs/study-files.md"

_TYPES = {bool: "true/false", int: "whole number", float: "number", str: "text", list: "list"}

#: Extra prose printed after a section's table.
_NOTES = {
    "landscape": """\
**Resistance from habitat suitability.** With `suitability`, each cell's suitability s (on
0 to `suitability_scale`) is rescaled to h = s / `suitability_scale` on 0-1 and turned into
resistance per unit length with R_max = `suitability_max_resistance` (100 in the source):

- `linear`: R = R_max - (R_max - 1) h
- `negative_exponential`: R = R_max - (R_max - 1) (1 - exp(-c h)) / (1 - exp(-c)), c = `suitability_shape`

Both give R = R_max where h = 0 and R = 1 where h = 1; the negative exponential tends to the
linear transform as c -> 0. The larger c, the longer resistance stays near 1 as suitability
falls: the animal crosses moderately suitable land freely and avoids only the least suitable.
The range of c compared in the source, about 0.25 (nearly linear) to 16, is quoted here from
memory. Cells with a suitability outside 0 to `suitability_scale` are an
error (mark them nodata instead). The resistance used is written as
`resistance_from_suitability.tif`.

Source: Keeley, A. T. H., Beier, P. & Gagnon, J. W. (2016). Estimating landscape resistance
from habitat suitability: effects of data source and nonlinearities. Landscape Ecology
31:2151. https://doi.org/10.1007/s10980-016-0387-5
""",
    "output": """\
A run writes into a hidden temporary folder beside `folder` and renames it to `folder` only
when every analysis succeeded, so a failed or interrupted run never leaves a folder that looks
finished. `manifest.json` in the folder records the landflow and dependency versions, the SHA-256
of every input file, every resolved setting, the solvers used with their residuals, and timings.
""",
}

_SWEEP = """\
## [sweep]

Optional. Varies settings over several runs of one study. Each key is the dotted name of a
setting above (`section.key`, or `analyses.name.key` for an analysis the study requests) and
its value a list of values to try. Every combination becomes one run, named after its values
(for example `suitability_shape-2_neighbours-4`), with its own output folder inside
`output.folder`. Every run is validated before any solve. Besides each run's own outputs, the
sweep writes to `output.folder`:

- `sweep_effective_resistance.csv`: one row per run and patch pair: run, patch_a, patch_b,
  resistance (the study must request `[analyses.effective_resistance]`);
- `sweep_runs.csv`: each run's status, folder and swept values.

Any setting except `output.folder` may be swept, including a list of rasters
(`"landscape.resistance" = ["today.tif", "2050.tif"]`).

```toml
[sweep]
"landscape.suitability_shape" = [0.25, 2.0, 8.0]
"landscape.neighbours" = [4, 8]
```

Run a sweep with `landflow run STUDY.toml` (one run after another) or with `landflow batch`,
which also takes many study files:

```
landflow batch STUDY.toml [STUDY.toml ...] [--workers N] [--scheduler ADDRESS] [--summary PATH] [--force]
```

`--workers N` runs on N local worker processes (default: one per CPU core); `--scheduler
ADDRESS` submits the runs to an existing dask.distributed cluster instead (its workers need
landflow installed and the same paths to inputs and outputs). A run that fails is reported
with its error and the others go on. `batch_summary.csv` (or `--summary PATH`) lists each run's
status (done, skipped, failed), seconds, output folder and error. Rerunning skips every run
whose `manifest.json` records the same settings, the same input hashes and the same landflow
version and whose listed outputs are all still there, and redoes the rest; `--force` reruns
everything.
"""


def toml_value(value):
    """A Python value written as TOML."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return repr(value)


def _type(key):
    if key.path == "input":
        return "path of an input file"
    if key.path == "output":
        return "path of a folder"
    return _TYPES.get(key.type, key.type.__name__)


def _default(key):
    if key.default is REQUIRED:
        return "required"
    if key.default is None:
        return "not set"
    return f"`{toml_value(key.default)}`"


def _cell(text):
    return str(text).replace("|", "\\|").replace("\n", " ")


def _table(section, table=""):
    if not section.keys:
        return [f"No settings: the empty table `[{table}]` requests the analysis.", ""]
    lines = ["| key | type | default | unit | meaning |", "|---|---|---|---|---|"]
    for name, key in section.keys.items():
        doc = key.doc
        if key.choices is not None:
            doc += f" (one of {', '.join(f'`{toml_value(c)}`' for c in key.choices)})"
        lines.append(f"| `{name}` | {_type(key)} | {_default(key)} | {_cell(key.unit or '-')} | {_cell(doc)} |")
    if section.exactly_one:
        groups = "; ".join(" or ".join(f"`{k}`" for k in g) for g in section.exactly_one)
        lines += ["", f"Exactly one of: {groups}."]
    return lines + [""]


def _example_value(name, key):
    if key.example is not None:
        return key.example
    if key.default not in (None, REQUIRED):
        return key.default
    if key.path == "input":
        return f"{name}.tif"
    if key.choices:
        return key.choices[0]
    return {bool: True, int: 1, float: 1.0, str: "...", list: []}.get(key.type, "...")


def _example(name, step):
    if getattr(step, "REGIONAL", None):
        study = ["[landscape]", 'resistance = "landcover_resistance.tif"']
    elif getattr(step, "NETWORK_ONLY", None):
        study = ["[network]", 'edges = "roads.gpkg"', 'resistance_column = "minutes"', "", "[zones]",
                 'features = "towns.gpkg"', "snap_distance = 50.0"]
    else:
        study = ["[landscape]", 'resistance = "resistance.tif"', "", "[patches]", 'raster = "patches.tif"']
    lines = ["```toml", *study, "", f"[analyses.{name}]"]
    for key_name, key in step.SETTINGS.keys.items():
        lines.append(f"{key_name} = {toml_value(_example_value(key_name, key))}")
    return lines + ["```", ""]


def render():
    """The Markdown reference of every table, key, type, default and unit."""
    from .steps import ANALYSES

    out = [
        "# Study files",
        "",
        f"<!-- Generated from landflow's schema by `{COMMAND}`. Do not edit by hand. -->",
        "",
        "A study is one TOML file: the landscape, the patches, the solver, where outputs go, which",
        "analyses to run and, optionally, a sweep over settings. Paths are relative to the study file.",
        "Every key is checked before any solve; an error names the file and the key, says what was",
        "expected, and suggests the closest known name for a misspelt one. `landflow check STUDY.toml`",
        "validates a study and its inputs without solving.",
        "",
        "Types: *text* and paths are TOML strings in quotes; *number* accepts `2` or `2.5`;",
        "*true/false* are TOML booleans. \"not set\" means the key is optional and has no default.",
        "",
    ]
    for name, section in SECTIONS.items():
        out += [f"## [{name}]", "", section.doc, ""] + _table(section)
        if name in _NOTES:
            out += [_NOTES[name]]
    out += ["## [analyses.*]", "",
            "Each analysis to run is a table `[analyses.NAME]`; they run in the order listed here, whatever",
            "the order in the file. An empty table runs the analysis with its defaults.", ""]
    for name, step in ANALYSES.items():
        out += [f"### [analyses.{name}]", "", step.SETTINGS.doc, ""] + _table(step.SETTINGS, f"analyses.{name}")
        out += ["Example:", ""] + _example(name, step)
    from types import SimpleNamespace

    from ..regional import NAME as REGIONAL, SETTINGS as REGIONAL_SETTINGS
    out += [f"### [analyses.{REGIONAL}]", "", REGIONAL_SETTINGS.doc, "",
            "A regional study holds `[landscape]`, this table, `[solver]` and `[output]`, and no patches; it runs",
            "tile by tile with `landflow run` (local worker processes, or `--scheduler ADDRESS`), and",
            "`landflow check` prints its tiling plan. See docs/regional.md.", ""]
    out += _table(REGIONAL_SETTINGS, f"analyses.{REGIONAL}")
    out += ["Example:", ""] + _example(REGIONAL, SimpleNamespace(SETTINGS=REGIONAL_SETTINGS, REGIONAL=True))
    out += [_SWEEP]
    return "\n".join(out).rstrip("\n") + "\n"


def main():
    sys.stdout.write(render())


if __name__ == "__main__":
    main()
