"""The network demo: its script remakes the committed data, and its study runs from the command line."""

import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import geopandas as gpd
import pandas as pd
import pytest

DEMO = Path(__file__).resolve().parents[2] / "demo_network"


def test_make_demo_remakes_the_committed_data(tmp_path):
    subprocess.run([sys.executable, str(DEMO / "make_demo.py"), "--out", str(tmp_path)], check=True,
                   capture_output=True)
    for name, layer in [("roads.gpkg", "roads"), ("roads_with_new_bridge.gpkg", "roads"), ("towns.geojson", None)]:
        made = gpd.read_file(tmp_path / name, layer=layer, engine="pyogrio")
        committed = gpd.read_file(DEMO / name, layer=layer, engine="pyogrio")
        assert made.crs == committed.crs and made.geom_equals_exact(committed, tolerance=1e-6).all(), name
        pd.testing.assert_frame_equal(made.drop(columns="geometry"), committed.drop(columns="geometry"))


def test_demo_study_runs_from_the_command_line(tmp_path):
    folder = tmp_path / "demo_network"
    shutil.copytree(DEMO, folder, ignore=shutil.ignore_patterns("*.py", "__pycache__"))
    study = folder / "study.toml"
    text, count = re.subn(r'(?m)^folder = ".*"', 'folder = "results"', study.read_text(encoding="utf-8"))
    assert count == 1
    study.write_text(text, encoding="utf-8")
    result = subprocess.run([sys.executable, "-m", "landflow", "run", "-q", str(study)], capture_output=True,
                            text=True)
    assert result.returncode == 0, result.stderr
    out = folder / "results"
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["landscape"]["network"] and manifest["landscape"]["patch_names"]["5"] == "Stanmere"
    pairs = pd.read_csv(out / "effective_resistance.csv")
    assert len(pairs) == 10 and (pairs["resistance"] > 0).all()            # five towns, all joined by road
    edges = gpd.read_file(out / "network.gpkg", layer="edges", engine="pyogrio")
    assert {"current_density", "restoration_gain", "criticality_rank", "least_cost_paths"} <= set(edges.columns)
    nodes = gpd.read_file(out / "network.gpkg", layer="nodes", engine="pyogrio")
    assert {"expected_steps", "absorption_probability_patch_4", "death_probability"} <= set(nodes.columns)
    # the seeded walk simulation agrees with the exact arrival probabilities (a 2000-walker sample: well within
    # 4.5 binomial standard errors unless the exact solve and the walk disagree)
    simulated = pd.read_csv(out / "walk_simulation_arrival.csv")
    assert simulated["difference_in_standard_errors"].abs().max() < 4.5
    page = (out / "report.html").read_text()
    assert (out / "current_density.png").is_file() and "Millford" in page
    # the page speaks of zones and the network, not of patches and a landscape
    assert "Effective resistance between zones" in page and "between patches" not in page
    assert "What-if: the changed network" in page and "death probability off zones" in page
    assert "zones Kestrel Bridge-Millford" in page or "zones Millford-Kestrel Bridge" in page
