"""Reruns give byte-identical tables and equal rasters; the manifest's hashes are the input files' SHA-256."""

import hashlib
import json

import numpy as np
import pytest
import rasterio

from study_fixtures import study_text, write_study
from landflow.study.run import run_study


def outputs(folder):
    return sorted(p.relative_to(folder) for p in folder.rglob("*") if p.is_file())


@pytest.mark.parametrize("method", ["direct", "multigrid"])
def test_two_runs_give_identical_tables_and_rasters(landscape, method):
    extra = "pair_current_maps = true\npair_voltage_maps = true\n\n[solver]\nmethod = \"%s\"\ntolerance = 1e-10" % method
    a = run_study(write_study(landscape / "a.toml", study_text(folder="a", extra=extra)))
    b = run_study(write_study(landscape / "b.toml", study_text(folder="b", extra=extra)))
    fa, fb = landscape / "a", landscape / "b"
    assert outputs(fa) == outputs(fb)
    tables = [p for p in outputs(fa) if p.suffix == ".csv"]
    rasters = [p for p in outputs(fa) if p.suffix == ".tif"]
    assert len(tables) == 2 and len(rasters) == 13      # current density + 6 pairs x (current, voltage)
    for name in tables:
        assert (fa / name).read_bytes() == (fb / name).read_bytes(), name
    for name in rasters:
        with rasterio.open(fa / name) as ra, rasterio.open(fb / name) as rb:
            np.testing.assert_array_equal(ra.read(1), rb.read(1), err_msg=str(name))
            assert ra.profile == rb.profile
    assert a["settings"]["solver"] == b["settings"]["solver"]
    assert [s["method"] for s in a["solvers"]] == [s["method"] for s in b["solvers"]]


def test_manifest_hashes_match_the_input_files(landscape):
    study = write_study(landscape / "s.toml", study_text(
        'suitability = "suitability.tif"\nsuitability_transform = "negative_exponential"\nsuitability_shape = 2'))
    run_study(study)
    manifest = json.loads((landscape / "results" / "manifest.json").read_text())
    recorded = {item["path"]: item["sha256"] for item in manifest["inputs"]}
    assert set(recorded) == {"suitability.tif", "patches.tif"}     # relative to the study file
    for path, digest in recorded.items():
        assert hashlib.sha256((landscape / path).read_bytes()).hexdigest() == digest  # hashlib, not landflow
    # every output, report.md included, with the SHA-256 of its bytes
    outputs = {item["file"]: item["sha256"] for item in manifest["outputs"]}
    assert "report.md" in outputs and "effective_resistance.csv" in outputs
    for name, digest in outputs.items():
        assert hashlib.sha256((landscape / "results" / name).read_bytes()).hexdigest() == digest
    # everything a second person needs to rerun it
    for field in ("landflow_version", "versions", "settings", "solvers", "timings_seconds"):
        assert manifest[field]
    assert manifest["settings"]["landscape"]["suitability_shape"] == 2.0
    assert {"numpy", "scipy", "rasterio", "python"} <= set(manifest["versions"])
    assert all(s["worst_relative_residual"] < 1e-6 for s in manifest["solvers"])
