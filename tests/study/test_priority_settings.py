"""Settings of the prioritisation steps: every bad input gets a clear error naming the key."""

import subprocess
import sys

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

from landflow.errors import ConfigError, InputError
from landflow.study.config import study_from_dict
from landflow.study.run import check_study, run_study


def write_raster(path, array, *, transform=None, dtype="float32", nodata=-9999.0):
    array = np.asarray(array)
    with rasterio.open(path, "w", driver="GTiff", height=array.shape[0], width=array.shape[1], count=1,
                       dtype=dtype, crs="EPSG:3035", transform=transform or from_origin(0, 100, 10, 10),
                       nodata=nodata) as dst:
        dst.write(array.astype(dtype), 1)


@pytest.fixture()
def folder(tmp_path):
    values = np.ones((6, 8), dtype=np.float32)
    values[:, 4] = -9999.0                    # a gap splits the landscape: patches 1, 2 | 3
    labels = np.zeros((6, 8), dtype=np.uint8)
    labels[0, 0], labels[5, 2], labels[2, 7] = 1, 2, 3
    write_raster(tmp_path / "resistance.tif", values)
    write_raster(tmp_path / "patches.tif", labels, dtype="uint8", nodata=0)
    write_raster(tmp_path / "shifted.tif", values, transform=from_origin(5, 100, 10, 10))
    no_patch = values.copy()
    no_patch[2, 7] = -9999.0
    write_raster(tmp_path / "no_patch_3.tif", no_patch)
    return tmp_path


def study(folder, analyses):
    raw = {"landscape": {"resistance": "resistance.tif"}, "patches": {"raster": "patches.tif"},
           "output": {"folder": "out", "quicklooks": False}, "analyses": analyses}
    return study_from_dict(raw, base_dir=folder, source="study.toml", path=folder / "study.toml")


@pytest.mark.parametrize("key", ["corridor_share", "pinch_share"])
@pytest.mark.parametrize("value", [0.0, 1.5, -1])
def test_share_outside_unit_interval(folder, key, value):
    with pytest.raises(ConfigError, match=rf"'analyses.corridor_maps.{key}' = .*must be greater than 0 and at most 1"):
        study(folder, {"corridor_maps": {key: value}})


@pytest.mark.parametrize("pairs, message", [
    ([[1]], r"each pair must be a list of two patch ids such as \[1, 2\]"),
    ([[1, 2.5]], r"each pair must be a list of two patch ids"),
    ([[1, ""]], r"each pair must be a list of two patch ids"),
    ([[2, 2]], r"the pair \[2, 2\] names the same patch twice; a pair needs two different patches"),
])
def test_malformed_pairs(folder, pairs, message):
    with pytest.raises(ConfigError, match=r"'analyses.restoration_gain.pairs' = .*" + message):
        study(folder, {"restoration_gain": {"pairs": pairs}})


@pytest.mark.parametrize("step", ["restoration_gain", "corridor_maps"])
def test_unknown_patch_in_pairs(folder, step):
    s = study(folder, {step: {"pairs": [[1, 9]]}})
    with pytest.raises(ConfigError, match=rf"study.toml: 'analyses.{step}.pairs': pair \[1, 9\]: there is no "
                                          r"patch 9; the patches are 1, 2, 3"):
        check_study(s)
    with pytest.raises(ConfigError, match="there is no patch 9"):
        run_study(s)
    assert not (folder / "out").exists()       # nothing half-written


def test_objective_pair_in_separate_pieces(folder):
    s = study(folder, {"restoration_gain": {"pairs": [[1, 3]]}})
    with pytest.raises(ConfigError, match=r"'analyses.restoration_gain.pairs': patches 1 and 3 lie in separate "
                                          "pieces of the landscape"):
        check_study(s)                         # known from the graph alone, before any solve
    with pytest.raises(ConfigError, match=r"'analyses.restoration_gain.pairs': patches 1 and 3 lie in separate "
                                          "pieces of the landscape"):
        run_study(s)
    assert not (folder / "out").exists()


def test_whatif_raster_on_another_grid(folder):
    s = study(folder, {"scenario_change": {"changed_landscape": "shifted.tif"}})
    with pytest.raises(InputError, match=r"'analyses.scenario_change.changed_landscape': .*shifted.tif: the "
                                         r"changed resistance raster .* is not on the grid of .*resistance.tif: "
                                         r"transform .*Resample it onto that grid"):
        check_study(s)


def test_whatif_raster_losing_a_patch(folder):
    s = study(folder, {"scenario_change": {"changed_landscape": "no_patch_3.tif"}})
    with pytest.raises(InputError, match=r"must keep every patch on the same grid; patch\(es\) 3 are lost"):
        run_study(s)
    assert not (folder / "out").exists()


def test_whatif_raster_missing(folder):
    with pytest.raises(ConfigError, match=r"'analyses.scenario_change.changed_landscape' names 'gone.tif', "
                                          "which does not exist"):
        study(folder, {"scenario_change": {"changed_landscape": "gone.tif"}})
    with pytest.raises(ConfigError, match=r"\[analyses.scenario_change\] needs the key 'changed_landscape'"):
        study(folder, {"scenario_change": {}})


def test_command_line_check_reports_unknown_pair(folder):
    (folder / "study.toml").write_text(
        '[landscape]\nresistance = "resistance.tif"\n[patches]\nraster = "patches.tif"\n'
        '[analyses.corridor_maps]\npairs = [[1, 2], [2, 5]]\n')
    done = subprocess.run([sys.executable, "-m", "landflow", "check", str(folder / "study.toml")],
                          capture_output=True, text=True)
    assert done.returncode == 1
    assert "'analyses.corridor_maps.pairs': pair [2, 5]: there is no patch 5" in done.stderr


def test_all_steps_run_on_a_split_landscape(folder):
    # pairs across the gap have infinite resistance: ranked last, no corridor, a warning
    s = study(folder, {"corridor_ranking": {}, "corridor_maps": {"pairs": [[1, 2], [2, 3]]},
                       "restoration_gain": {}, "least_cost_paths": {"pair_route_maps": True},
                       "scenario_change": {"changed_landscape": "resistance.tif"}})
    manifest = run_study(s)
    files = {o["file"] for o in manifest["outputs"]}
    assert {"corridor_ranking.csv", "pair_maps/1-2/corridor.tif", "restoration_gain.tif",
            "pair_maps/1-2/least_cost_path.tif", "scenario_change.csv"} <= files
    assert "pair_maps/2-3/corridor.tif" not in files
    assert any("2 and 3 are in separate pieces" in w for w in manifest["warnings"])
    import pandas as pd
    ranking = pd.read_csv(folder / "out" / "corridor_ranking.csv")
    assert ranking.loc[0, ["patch_a", "patch_b"]].tolist() == [1, 2]
    assert np.isinf(ranking["effective_resistance"][1:]).all()
    change = pd.read_csv(folder / "out" / "scenario_change.csv")
    assert (change["resistance_change"].fillna(0) == 0).all()
    # one solve of the piece holding patches 1 and 2, shared by the steps, and one more on the changed raster
    assert len(manifest["solvers"]) == 2


def test_gain_cells_list_only_landscape_cells(folder):
    # 48 cells, 6 of them nodata: asking for more cells than the landscape holds lists the 42 landscape cells
    s = study(folder, {"restoration_gain": {"top_cells": 100}})
    run_study(s)
    import pandas as pd
    cells = pd.read_csv(folder / "out" / "restoration_gain_cells.csv")
    assert len(cells) == 42
    assert (cells["col"] != 4).all() and np.isfinite(cells["gain"]).all()
    assert (np.diff(cells["gain"]) <= 0).all()
