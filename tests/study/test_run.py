"""A study from patch points with patch weights, through the runner, against the API."""

import json

import numpy as np
import pandas as pd
import pytest
import rasterio

import landflow as lf
from landflow.study.config import load_study
from landflow.io.rasters import read_grid
from landflow.io.sites import read_patch_points


@pytest.fixture
def points_study(study, tmp_path, centre):
    rows = [[*centre(1, 1), 1, 5.0], [*centre(1, 2), 1, 5.0], [*centre(4, 5), 2, 2.0], [*centre(3, 0), 3, 0.5]]
    pd.DataFrame(rows, columns=["x", "y", "id", "adults"]).to_csv(tmp_path / "points.csv", index=False)
    return study(landscape='resistance = "resistance.tif"\nneighbours = 4\nedge_rule = "mean_conductance"',
                 patches='points = "points.csv"\nweight_column = "adults"',
                 analyses="[analyses.current_density]\npair_current_maps = true\n\n[analyses.effective_resistance]\n")


def test_points_study_with_patch_weights_matches_the_api(points_study, tmp_path):
    manifest = lf.run_study(points_study)
    out = tmp_path / "results"
    grid = read_grid(tmp_path / "resistance.tif")
    patches = read_patch_points(tmp_path / "points.csv", grid, weight_column="adults")
    graph = lf.build_graph(grid, patches.labels, neighbours=4, edge_rule="mean_conductance")
    voltages = lf.patch_voltages(graph)
    weight = np.array([patches.weight[int(p)] for p in graph.patch_ids])
    np.testing.assert_array_equal(weight, [5.0, 2.0, 0.5])
    expected = graph.to_raster(lf.current_density(voltages, lf.pair_weights(voltages, weight)))
    with rasterio.open(out / "current_density.tif") as src:
        written = src.read(1, masked=True)
    np.testing.assert_array_equal(written.mask, np.isnan(expected))
    np.testing.assert_allclose(written.filled(np.nan), expected, rtol=1e-6)     # float32 on disk
    with rasterio.open(out / "pair_maps" / "1-3" / "current.tif") as src:
        np.testing.assert_allclose(src.read(1, masked=True).filled(np.nan),
                                   graph.to_raster(lf.pair_current(voltages, 0, 2)), rtol=1e-6)
    table = pd.read_csv(out / "effective_resistance.csv")
    np.testing.assert_allclose(table.resistance, lf.resistance_table(voltages).resistance, rtol=1e-12)
    on_disk = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert on_disk["settings"]["patches"]["weight_column"] == "adults"
    assert [o["file"] for o in on_disk["outputs"]] == [o["file"] for o in manifest["outputs"]]


def test_rerun_gives_identical_numbers(points_study, tmp_path):
    lf.run_study(points_study)
    first = {name: (tmp_path / "results" / name).read_bytes()
             for name in ("effective_resistance.csv", "effective_resistance_matrix.csv")}
    with rasterio.open(tmp_path / "results" / "current_density.tif") as src:
        current = src.read(1)
    lf.run_study(points_study)
    for name, content in first.items():
        assert (tmp_path / "results" / name).read_bytes() == content
    with rasterio.open(tmp_path / "results" / "current_density.tif") as src:
        np.testing.assert_array_equal(src.read(1), current)


def test_weight_column_needs_points(study):
    with pytest.raises(lf.ConfigError, match=r"'patches\.weight_column' only applies to patch points or "
                                             r"features; with a patch raster use 'patches\.weight_raster'"):
        lf.run_study(study(patches='raster = "patches.tif"\nweight_column = "adults"'))
    with pytest.raises(lf.ConfigError, match=r"'patches\.weight_column' only applies to patch points"):
        load_study(study(patches='raster = "patches.tif"\nweight_column = "adults"'))   # before any input is read


def test_each_distinct_system_is_factorised_once_and_the_manifest_says_who_shared_it(study, tif):
    labels = np.zeros((6, 8), dtype="int32")
    labels[1, 1:3], labels[4, 5:7], labels[1, 5] = 1, 2, 3
    tif("three.tif", labels, nodata=0)
    # hitting maps of a pair need only the walk absorbed at that pair: the every-patch walk is not factorised
    alone = lf.run_study(study(patches='raster = "three.tif"',
                               analyses="[analyses.hitting_probability]\npairs = [[1, 2]]\n"))
    assert [s["purpose"] for s in alone["solvers"]] == ["hitting probability (two patches absorbing)"]
    # three steps on the every-patch walk share one factor; two steps share the patch voltages
    both = lf.run_study(study(analyses="[analyses.effective_resistance]\n\n[analyses.current_density]\n\n"
                                       "[analyses.absorption_probability]\n\n[analyses.expected_steps]\n\n"
                                       "[analyses.hitting_probability]\nbefore_any_other = [1]\n"))
    by_purpose = {s["purpose"]: s for s in both["solvers"]}
    assert set(by_purpose) == {"patch voltages (effective resistance, current)",
                               "absorbing walk (every patch absorbing)"}
    assert by_purpose["patch voltages (effective resistance, current)"]["used_by"] == [
        "effective_resistance", "current_density"]
    assert by_purpose["absorbing walk (every patch absorbing)"]["used_by"] == [
        "hitting_probability", "absorption_probability", "expected_steps"]


def test_later_stages_modules_are_imported_while_an_engine_factorises(caplog):
    # the modules of the maps and the report load on a second thread once a direct engine takes over
    # (not before: the system's numpy work would share the GIL with them); leaving the block waits for
    # them, a module that cannot be imported is left for the stage that needs it, and without a direct
    # factorisation nothing is imported ahead
    import sys

    import scipy.sparse as sp

    from landflow.solve import factorize
    from landflow.study.run import imported_meanwhile
    system = sp.csr_array(sp.diags_array([[-1.0] * 3, [3.0] * 4, [-1.0] * 3], offsets=[-1, 0, 1]))
    sys.modules.pop("xml.dom.minidom", None)
    with caplog.at_level("DEBUG", logger="landflow"):
        with imported_meanwhile(("landflow_no_such_module", "xml.dom.minidom")):
            assert "xml.dom.minidom" not in sys.modules
            factorize(system, method="superlu")
    assert "xml.dom.minidom" in sys.modules
    assert "could not import landflow_no_such_module ahead of time" in caplog.text
    sys.modules.pop("xml.dom.minidom")
    with imported_meanwhile(("xml.dom.minidom",)):
        pass
    assert "xml.dom.minidom" not in sys.modules
