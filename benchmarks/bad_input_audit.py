"""Audit of landflow's answers to bad input: every case through `landflow check` and `landflow run`.

    python benchmarks/bad_input_audit.py [--jobs 2] [--show clean|unclear|traceback|silent|hang]

Each case is a small study with one thing wrong: a key's value (wrong type, out of range, not finite), a
file (missing, a folder, a device, a pipe, damaged, not georeferenced, on another grid, with bad values), a
points table (blank values, text, duplicates, outside the raster), an output folder landflow may not write
to, or a command-line mistake. Both commands run in a fresh process with a time limit, and each outcome is
classed as

* clean: exit code 1 or 2 and one line "landflow: error: ..." naming the file, key, cell or line;
* unclear: an error line that names none of them, or more than one line;
* traceback: a Python traceback reached the user;
* silent: exit code 0 without a warning although the input is wrong (exit 0 with a warning that names
  the problem, as for all-zero patch weights, counts as clean);
* hang: the command did not end within the time limit.

A case counts once per command (check and run), so 70 cases make 140 answers. The tally is printed at the
end; `--show KIND` lists the answers of that kind.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import textwrap
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import rasterio
from rasterio.transform import from_origin

ROOT = Path(__file__).resolve().parents[1]
TIMEOUT = 60

BASE = {
    "landscape": 'resistance = "resistance.tif"',
    "patches": 'raster = "patches.tif"',
    "output": 'folder = "results"\nquicklooks = false',
    "analyses": "[analyses.effective_resistance]\n\n[analyses.current_density]",
    "extra": "",
}


def write_raster(path, array, dtype="float32", nodata=-9999.0, transform=True, crs="EPSG:25832"):
    array = np.asarray(array)
    profile = {"driver": "GTiff", "height": array.shape[0], "width": array.shape[1], "count": 1, "dtype": dtype,
               "nodata": nodata}
    if transform:
        profile.update(crs=crs, transform=from_origin(500_000.0, 5_300_000.0, 10.0, 10.0))
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(array.astype(dtype), 1)


def landscape(folder):
    rng = np.random.default_rng(3)
    write_raster(folder / "resistance.tif", rng.lognormal(0, 0.5, (12, 14)))
    labels = np.zeros((12, 14), dtype=np.int32)
    labels[1:3, 1:3], labels[9:11, 10:12], labels[1:3, 10:12] = 1, 2, 3
    write_raster(folder / "patches.tif", labels, dtype="int32", nodata=0)
    write_raster(folder / "mortality.tif", np.full((12, 14), 0.01))
    write_raster(folder / "weights.tif", np.ones((12, 14)))


def study(**parts):
    p = {**BASE, **parts}
    return (f"[landscape]\n{p['landscape']}\n\n[patches]\n{p['patches']}\n\n[output]\n{p['output']}\n\n"
            f"{p['analyses']}\n\n{p['extra']}\n")


def cases():
    """(name, study text or None, setup(folder) or None, extra command-line words)."""
    out = []

    def add(name, text, setup=None, argv=()):
        out.append((name, text, setup, argv))

    # -- values of keys ------------------------------------------------------------------------------------
    for key, values in {
        "neighbours": ["6", '"8"', "8.5"], "edge_rule": ['"average"', "1"],
        "suitability_max_resistance": ["0.5", "inf", "nan"],
    }.items():
        for v in values:
            land = BASE["landscape"] if key != "suitability_max_resistance" else 'suitability = "weights.tif"'
            add(f"landscape.{key} = {v}", study(landscape=f"{land}\n{key} = {v}"))
    add("suitability_shape = inf", study(landscape='suitability = "weights.tif"\nsuitability_transform = '
                                                   '"negative_exponential"\nsuitability_shape = inf'))
    add("suitability_scale = 0", study(landscape='suitability = "weights.tif"\nsuitability_scale = 0'))
    for v in ["inf", "nan", "-1", "0", "1.5", '"small"']:
        add(f"solver.tolerance = {v}", study(extra=f"[solver]\ntolerance = {v}"))
    add("solver.method = fastest", study(extra='[solver]\nmethod = "fastest"'))
    for v in ["-1", "1.5", "nan", "inf"]:
        add(f"mortality.death_per_resistance = {v}", study(extra=f"[mortality]\ndeath_per_resistance = {v}"))
    add("two mortality keys", study(extra='[mortality]\nraster = "mortality.tif"\ndeath_per_resistance = 0.1'))
    for v in ["-1", '"one"', "1.5"]:
        add(f"walk_simulation.seed = {v}", study(analyses=f"[analyses.walk_simulation]\nseed = {v}"))
    for v in ["0", "-5"]:
        add(f"walk_simulation.walkers = {v}", study(analyses=f"[analyses.walk_simulation]\nwalkers = {v}"))
    for v in ["0", "1.5", "nan"]:
        add(f"corridor_maps.corridor_share = {v}",
            study(analyses=f"[analyses.corridor_maps]\ncorridor_share = {v}"))
    for v in ["[[1, 9]]", "[[1]]", "[[1, 1]]", "[1, 2]", '"all"']:
        add(f"corridor_maps.pairs = {v}", study(analyses=f"[analyses.corridor_maps]\npairs = {v}"))
    for v in ["[[1, 9]]", "[]"]:
        add(f"hitting_probability.pairs = {v}", study(analyses=f"[analyses.hitting_probability]\npairs = {v}"))
    add("expected_visits.release_patches = [7]",
        study(analyses="[analyses.expected_visits]\nrelease_patches = [7]"))
    add("absorption_probability.patches = [0]",
        study(analyses="[analyses.absorption_probability]\npatches = [0]"))
    add("restoration_gain.top_cells = 0", study(analyses="[analyses.restoration_gain]\ntop_cells = 0"))
    add("unknown analysis", study(analyses="[analyses.resistance_distance]"))
    add("misspelt key", study(landscape='resistance = "resistance.tif"\nneighbors = 8'))
    add("unknown section", study(extra="[solvers]\nmethod = \"direct\""))
    add("no analyses", study(analyses=""))
    add("old key per_pair", study(analyses="[analyses.current_density]\nper_pair = true"))
    add("two landscapes", study(landscape='resistance = "resistance.tif"\nconductance = "resistance.tif"'))
    add("no landscape", study(landscape=""))
    add("not TOML", "[landscape\nresistance = 1\n")
    add("empty study file", "")

    # -- files -----------------------------------------------------------------------------------------------
    add("missing raster", study(landscape='resistance = "nothere.tif"'))
    add("raster is a folder", study(landscape='resistance = "adir"'), lambda d: (d / "adir").mkdir())
    add("raster is /dev/zero", study(landscape='resistance = "/dev/zero"'))
    add("raster is a pipe", study(landscape='resistance = "pipe.tif"'), lambda d: os.mkfifo(d / "pipe.tif"))

    def truncated(d):
        data = (d / "resistance.tif").read_bytes()
        (d / "cut.tif").write_bytes(data[: len(data) // 2])
    add("truncated GeoTIFF", study(landscape='resistance = "cut.tif"'), truncated)
    add("text file named .tif", study(landscape='resistance = "text.tif"'),
        lambda d: (d / "text.tif").write_text("not a raster"))

    def png(d):
        with rasterio.open(d / "picture.tif", "w", driver="PNG", width=14, height=12, count=1, dtype="uint8") as dst:
            dst.write(np.ones((12, 14), "uint8"), 1)
    add("PNG named .tif", study(landscape='resistance = "picture.tif"'), png)
    add("two-band raster", study(landscape='resistance = "two.tif"'),
        lambda d: _two_bands(d / "two.tif"))
    add("geographic CRS", study(landscape='resistance = "geo.tif"'),
        lambda d: write_raster(d / "geo.tif", np.ones((12, 14)), crs="EPSG:4326"))
    add("zero resistance", study(landscape='resistance = "zero.tif"'), lambda d: _edit(d, "zero.tif", 0.0))
    add("negative resistance", study(landscape='resistance = "neg.tif"'), lambda d: _edit(d, "neg.tif", -2.0))
    add("NaN inside", study(landscape='resistance = "nan.tif"'), lambda d: _edit(d, "nan.tif", np.nan))
    add("resistance 3e38", study(landscape='resistance = "huge.tif"'), lambda d: _edit(d, "huge.tif", 3e38))
    add("all nodata", study(landscape='resistance = "empty.tif"'),
        lambda d: write_raster(d / "empty.tif", np.full((12, 14), -9999.0)))
    add("patches on another grid", study(patches='raster = "small.tif"'),
        lambda d: write_raster(d / "small.tif", np.ones((5, 5)), dtype="int32", nodata=0))
    add("fractional patch labels", study(patches='raster = "frac.tif"'),
        lambda d: _labels(d, "frac.tif", 1.5, "float32"))
    add("negative patch labels", study(patches='raster = "negl.tif"'),
        lambda d: _labels(d, "negl.tif", -3, "int32"))
    add("one patch only", study(patches='raster = "one.tif"'), lambda d: _one_patch(d))
    add("patch on nodata", study(landscape='resistance = "holed.tif"'), lambda d: _hole_under_patch(d))
    add("patch cut off from the others", study(landscape='resistance = "wall.tif"',
                                               analyses="[analyses.absorption_probability]"),
        lambda d: _wall(d))
    add("mortality 1.0", study(extra='[mortality]\nraster = "m1.tif"',
                               analyses="[analyses.expected_steps]"),
        lambda d: write_raster(d / "m1.tif", np.full((12, 14), 1.0)))
    add("mortality negative", study(extra='[mortality]\nraster = "mneg.tif"',
                                    analyses="[analyses.absorption_probability]"),
        lambda d: write_raster(d / "mneg.tif", np.full((12, 14), -0.1)))
    add("all-zero patch weights", study(patches='raster = "patches.tif"\nweight_raster = "zw.tif"'),
        lambda d: write_raster(d / "zw.tif", np.zeros((12, 14))))
    add("negative patch weights", study(patches='raster = "patches.tif"\nweight_raster = "nw.tif"'),
        lambda d: write_raster(d / "nw.tif", np.full((12, 14), -1.0)))
    add("what-if on another grid", study(analyses='[analyses.scenario_change]\nchanged_landscape = "small.tif"'),
        lambda d: write_raster(d / "small.tif", np.ones((5, 5))))
    add("crossing time negative", study(analyses='[analyses.expected_steps]\ncrossing_time = "ct.tif"'),
        lambda d: write_raster(d / "ct.tif", np.full((12, 14), -1.0)))

    # -- points tables ---------------------------------------------------------------------------------------
    x0, y0 = 500_015.0, 5_299_985.0
    for name, body in {
        "points: blank value": f"x,y,id\n{x0},{y0},1\n{x0 + 100},,2\n",
        "points: text id": f"x,y,id\n{x0},{y0},1\n{x0 + 100},{y0 - 50},two\n",
        "points: missing column": f"x,y\n{x0},{y0}\n",
        "points: outside the raster": f"x,y,id\n{x0},{y0},1\n0,0,2\n",
        "points: two ids in one cell": f"x,y,id\n{x0},{y0},1\n{x0 + 1},{y0 - 1},2\n",
        "points: id 0": f"x,y,id\n{x0},{y0},0\n{x0 + 100},{y0 - 50},2\n",
        "points: empty file": "",
        "points: not CSV": "\x00\x01\x02binary",
    }.items():
        add(name, study(patches='points = "points.csv"'), lambda d, b=body: (d / "points.csv").write_text(b))

    # -- output folders --------------------------------------------------------------------------------------
    add("output folder '.'", study(output='folder = "."'))
    add("output folder '..'", study(output='folder = ".."'))
    add("output folder holds a user's file", study(), lambda d: _user_folder(d))
    add("output folder is a file", study(output='folder = "afile"'), lambda d: (d / "afile").write_text("x"))
    # -- command line ----------------------------------------------------------------------------------------
    add("study file missing", None, argv=("nothere.toml",))
    add("study file is a folder", None, lambda d: (d / "s.toml").mkdir(), argv=("s.toml",))
    return out


def _two_bands(path):
    with rasterio.open(path, "w", driver="GTiff", width=14, height=12, count=2, dtype="float32",
                       crs="EPSG:25832", transform=from_origin(500_000.0, 5_300_000.0, 10.0, 10.0)) as dst:
        dst.write(np.ones((2, 12, 14), "float32"))


def _edit(d, name, value):
    with rasterio.open(d / "resistance.tif") as src:
        values = src.read(1)
    values[5, 6] = value
    write_raster(d / name, values)


def _labels(d, name, value, dtype):
    with rasterio.open(d / "patches.tif") as src:
        labels = src.read(1).astype("float64")
    labels[6, 6] = value
    write_raster(d / name, labels, dtype=dtype, nodata=0)


def _one_patch(d):
    labels = np.zeros((12, 14), dtype=np.int32)
    labels[1:3, 1:3] = 1
    write_raster(d / "one.tif", labels, dtype="int32", nodata=0)


def _hole_under_patch(d):
    with rasterio.open(d / "resistance.tif") as src:
        values = src.read(1)
    values[1:3, 1:3] = -9999.0
    write_raster(d / "holed.tif", values)


def _wall(d):
    with rasterio.open(d / "resistance.tif") as src:
        values = src.read(1)
    values[:, 7] = -9999.0
    values[5, :] = -9999.0
    write_raster(d / "wall.tif", values)


def _user_folder(d):
    (d / "results").mkdir()
    (d / "results" / "field_notes.txt").write_text("mine")


def classify(result, timed_out):
    if timed_out:
        return "hang"
    err = result.stderr.strip()
    if "Traceback" in err:
        return "traceback"
    if result.returncode == 0:
        return "clean" if "WARNING" in err else "silent"      # a warning that names the problem counts
    errors = [line for line in err.splitlines() if "error" in line.lower()]
    if len(errors) == 1 and errors[0].startswith(("landflow: error:", "usage:", "landflow: ")) and any(
            mark in errors[0] for mark in (".tif", ".csv", ".toml", "'", "row ", "line ", "folder", "--")):
        return "clean"
    if result.returncode == 2 and "usage:" in err:
        return "clean"
    return "unclear"


def run_case(case, command, base):
    name, text, setup, argv = case
    folder = Path(tempfile.mkdtemp(dir=base))
    landscape(folder)
    if setup is not None:
        setup(folder)
    if text is not None:
        (folder / "s.toml").write_text(textwrap.dedent(text))
    args = [sys.executable, "-m", "landflow", command, "-q", *(argv or ("s.toml",))]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    try:
        result = subprocess.run(args, cwd=folder, env=env, capture_output=True, text=True, timeout=TIMEOUT,
                                stdin=subprocess.DEVNULL)
        return name, command, classify(result, False), result.stderr.strip().splitlines()[-1:] or [""]
    except subprocess.TimeoutExpired:
        return name, command, "hang", [""]


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--show", choices=["clean", "unclear", "traceback", "silent", "hang"], action="append")
    args = parser.parse_args()
    all_cases = cases()
    with tempfile.TemporaryDirectory() as base, ThreadPoolExecutor(args.jobs) as pool:
        results = list(pool.map(lambda job: run_case(*job, base),
                                [(case, command) for case in all_cases for command in ("check", "run")]))
    tally = {kind: 0 for kind in ("clean", "unclear", "traceback", "silent", "hang")}
    for name, command, kind, last in results:
        tally[kind] += 1
        if args.show and kind in args.show:
            print(f"{kind:9s} {command:5s} {name}: {last[0][:220]}")
    print(f"{len(all_cases)} cases, {len(results)} answers: " + ", ".join(f"{k} {v}" for k, v in tally.items()))


if __name__ == "__main__":
    main()
