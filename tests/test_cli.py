"""The command line, end to end on a copy of the demo, against the Python API."""

import hashlib
import json
import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rasterio

import landflow as lf
from landflow.io.rasters import read_grid
from landflow.io.sites import read_patch_raster

DEMO = Path(__file__).resolve().parents[1] / "demo_rasters"


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory, cli):
    """Copy the demo into a temporary folder, point its output there, and run it once.

    ``check`` (on a twin study whose output folder must never appear) and ``--version``
    run at the same time, so the interpreter start-ups overlap.
    """
    folder = tmp_path_factory.mktemp("demo") / "demo_rasters"
    shutil.copytree(DEMO, folder, ignore=shutil.ignore_patterns("*.py", "__pycache__"))
    study = folder / "study.toml"
    text = study.read_text(encoding="utf-8")
    for name, out in [("study.toml", "demo_results"), ("check_only.toml", "never_written")]:
        changed, count = re.subn(r'(?m)^folder = ".*"', f'folder = "{out}"', text)
        assert count == 1
        (folder / name).write_text(changed, encoding="utf-8")
    run, check, version = cli(("run", study), ("check", folder / "check_only.toml"), ("--version",))
    return study, folder / "demo_results", run, check, version


def test_run_succeeds_and_writes_the_outputs(demo_run):
    study, out, result, _, _ = demo_run
    assert result.returncode == 0, result.stderr
    assert "Traceback" not in result.stderr
    assert re.match(rf"landflow: wrote \d+ outputs to {re.escape(str(out))} in [\d.]+ s", result.stdout)
    names = {p.name for p in out.iterdir()}
    assert {"effective_resistance.csv", "effective_resistance_matrix.csv", "current_density.tif",
            "current_density.png", "manifest.json", "report.md", "map_layers.gpkg"} <= names
    with rasterio.open(out / "current_density.tif") as src:
        assert src.tags(ns="IMAGE_STRUCTURE")["LAYOUT"] == "COG" and src.overviews(1)
    assert not any(p.name.startswith(".") for p in out.parent.iterdir())     # no temporary folders left


def test_numbers_match_the_api(demo_run):
    study, out, *_ = demo_run
    grid = read_grid(study.parent / "resistance.tif")
    patches = lf.read_patch_features(study.parent / "ponds.gpkg", grid, layer="ponds")
    np.testing.assert_array_equal(patches.labels, read_patch_raster(study.parent / "ponds.tif", grid).labels)
    graph = lf.build_graph(grid, patches.labels, neighbours=8, edge_rule="mean_resistance")
    voltages = lf.patch_voltages(graph)
    expected = lf.resistance_table(voltages)
    written = pd.read_csv(out / "effective_resistance.csv")
    assert list(written.columns) == ["patch_a", "patch_b", "resistance", "escape_probability_a_to_b",
                                     "escape_probability_b_to_a", "commute_time", "cell_width", "cell_height",
                                     "values_per"]
    assert len(written) == graph.n_patches * (graph.n_patches - 1) // 2
    np.testing.assert_array_equal(written[["patch_a", "patch_b"]], expected[["patch_a", "patch_b"]])
    for column in ["resistance", "escape_probability_a_to_b", "escape_probability_b_to_a", "commute_time"]:
        np.testing.assert_allclose(written[column], expected[column], rtol=1e-12)
    matrix = pd.read_csv(out / "effective_resistance_matrix.csv", index_col=0)
    np.testing.assert_allclose(matrix.to_numpy(), lf.effective_resistance(voltages), rtol=1e-12)
    np.testing.assert_array_equal(matrix.index, graph.patch_ids)
    with rasterio.open(out / "current_density.tif") as src:
        assert src.crs == grid.crs and src.transform == grid.transform
        current = src.read(1, masked=True)
    assert current.mask.sum() == (~grid.mask).sum()
    assert float(current.min()) > 0


def test_manifest_records_inputs_settings_and_solver(demo_run):
    study, out, *_ = demo_run
    manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["landflow_version"] == lf.__version__
    inputs = {Path(item["path"]).name: item["sha256"] for item in manifest["inputs"]}
    referenced = set(re.findall(r'"([\w.]+\.(?:tif|gpkg))"', study.read_text(encoding="utf-8")))
    assert {"resistance.tif", "ponds.gpkg"} <= referenced
    assert set(inputs) == referenced
    for name, digest in inputs.items():
        assert digest == hashlib.sha256((study.parent / name).read_bytes()).hexdigest()
    assert manifest["settings"]["landscape"]["neighbours"] == 8
    assert manifest["solvers"] and manifest["solvers"][0]["method"] == "direct"
    assert manifest["solvers"][0]["worst_relative_residual"] < 1e-6
    assert all((out / o["file"]).is_file() for o in manifest["outputs"])
    assert "total" in manifest["timings_seconds"]
    assert manifest["command"] == f"python -m landflow run {study}"


def test_check_validates_without_writing(demo_run):
    study, _, _, check, _ = demo_run
    assert check.returncode == 0, check.stderr
    assert re.search(r"check_only\.toml is valid: [\d,]+ landscape cells, \d+ patches, 1 connected piece\(s\); "
                     r"analyses: effective_resistance, current_density", check.stdout)
    assert not (study.parent / "never_written").exists()


def test_version(demo_run):
    *_, version = demo_run
    assert version.returncode == 0
    assert version.stdout.strip() == f"landflow {lf.__version__}"


def test_a_stop_whose_exception_was_dropped_is_raised_at_the_next_checkpoint():
    # Python drops an exception raised while C code calls back into Python ("Exception ignored"); the
    # signal is remembered, so the run's next checkpoint stops it all the same
    import os
    import signal

    from landflow import interrupt
    restore = interrupt.install()
    try:
        try:
            os.kill(os.getpid(), signal.SIGTERM)
            for _ in range(1000):        # the handler runs at a bytecode boundary in here
                pass
        except interrupt.Terminated:
            pass                          # dropped, as a C callback would drop it
        with pytest.raises(interrupt.Terminated):
            interrupt.check()
    finally:
        restore()
    interrupt.install()()                 # a fresh install forgets the old request
    interrupt.check()
