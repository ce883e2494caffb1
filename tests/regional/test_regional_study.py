"""Regional studies end to end: tiling, Dask workers, resuming, the COG mosaic, the command line, bad settings."""

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
import rasterio

import landflow as lf
from landflow.cli import main
from landflow.errors import ConfigError, InputError
from landflow.regional import check_regional, plan_tiles, regional_plan, run_regional, tile_flow
from landflow.regional._run import _jobs

DEMO = Path(__file__).resolve().parents[2] / "demo_rasters"


def _study(folder, raster, **keys):
    table = {"ring_nodes": 16, "tile": 128, "margin": 600.0, "buffer_width": 250.0, "seed": 1, **keys}
    lines = [f"{k} = {json.dumps(v)}" for k, v in table.items()]
    path = Path(folder) / "regional.toml"
    path.write_text(f'[landscape]\nresistance = "{raster}"\n\n[analyses.regional_current]\n' + "\n".join(lines)
                    + '\n\n[output]\nfolder = "out"\n', encoding="utf-8")
    return path


def _read(path):
    with rasterio.open(path) as src:
        data = src.read(1).astype(float)
        data[data == src.nodata] = np.nan
        return data, src


@pytest.fixture
def demo(tmp_path):
    shutil.copy(DEMO / "resistance.tif", tmp_path / "resistance.tif")
    return tmp_path


def test_plan_cuts_the_landscape_into_cores_that_cover_it_once():
    plan = plan_tiles((250, 330), (25.0, 25.0), tile=100, margin=510.0, buffer_width=100.0, ring_nodes=8)
    assert plan.grid == (3, 4) and len(plan.tiles) == 12
    assert plan.margin == (21, 21) and plan.buffer == (4, 4) and plan.window == (142, 142)
    covered = np.zeros((250, 330), int)
    for t in plan.tiles:
        covered[t.core_row0:t.core_row0 + t.core_rows, t.core_col0:t.core_col0 + t.core_cols] += 1
        assert plan.core_in_window(t) == (21, 21)
    assert (covered == 1).all()
    single = plan_tiles((90, 60), (25.0, 25.0), tile=100, margin=510.0, buffer_width=100.0, ring_nodes=8)
    assert not single.tiled and single.margin == (0, 0) and single.window == (90, 60)


def test_one_tile_equals_current_density_with_ring_nodes_as_patches(demo):
    """No tiling: the study's tile is landflow's current density with the ring nodes as point patches, 1e-10."""
    study = _study(demo, "resistance.tif", tile=400, relative_to_uniform=False)
    study, info, plan, extra = regional_plan(study)
    assert not plan.tiled
    jobs, _, _ = _jobs(study, info, plan, extra, demo)
    flow, _, _ = tile_flow(jobs[0])
    grid = lf.read_grid(demo / "resistance.tif")
    b = plan.buffer[0]
    padded = np.pad(np.where(grid.mask, grid.values, extra["buffer_value"]), b, constant_values=extra["buffer_value"])
    mask = np.pad(grid.mask, b, constant_values=True)
    labels = np.zeros(padded.shape, np.int64)
    rows, cols = lf.analyses.regional.ring_nodes(padded.shape, 16, jobs[0].offset)
    labels[rows, cols] = np.arange(1, 17)
    graph = lf.build_graph(lf.Grid(padded, mask), labels)
    expected = graph.to_raster(lf.current_density(lf.patch_voltages(graph)), dtype=np.float64)[b:-b, b:-b]
    np.testing.assert_allclose(flow, expected, rtol=1e-10, atol=0)
    assert extra["buffer_value"] == np.median(grid.values[grid.mask])


def test_tiled_demo_on_a_local_cluster_resumes_and_matches_one_process(demo):
    distributed = pytest.importorskip("distributed")
    study = _study(demo, "resistance.tif", ring_nodes=8)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=":0") as cluster, distributed.Client(cluster) as client:
        first = run_regional(study, client=client)
        assert first["regional"]["tiles"] == 6 and first["regional"]["tiles_solved"] == 6
        mosaic, src = _read(demo / "out" / "regional_current.tif")
        assert src.shape == (240, 320) and src.crs.to_epsg() == 25832
        with rasterio.open(demo / "out" / "regional_current.tif") as cog:
            assert cog.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG" and cog.overviews(1)
        # a stopped run: one tile lost its record, another its file; the rerun redoes only those two
        tiles = demo / "out" / ".landflow-tiles"
        (tiles / "r0000_c0001.json").unlink()
        (tiles / "r0001_c0002.tif").unlink()
        again = run_regional(study, client=client)
        assert again["regional"]["tiles_solved"] == 2 and again["regional"]["tiles_up_to_date"] == 4
        np.testing.assert_array_equal(_read(demo / "out" / "regional_current.tif")[0], mosaic)
        # through the scheduler's address, as on a cluster (the client code of landflow batch)
        (tiles / "r0000_c0000.json").unlink()
        by_address = run_regional(study, scheduler=cluster.scheduler_address)
        assert by_address["regional"]["tiles_solved"] == 1
    log = (demo / "out" / "progress.log").read_text()
    assert "tiles 6/6 done (5 up to date)" in log
    # the same study on this process alone gives the same map
    alone = demo / "alone"
    alone.mkdir()
    shutil.copy(demo / "resistance.tif", alone / "resistance.tif")
    run_regional(_study(alone, "resistance.tif", ring_nodes=8), workers=0)
    np.testing.assert_array_equal(_read(alone / "out" / "regional_current.tif")[0], mosaic)
    finite = mosaic[np.isfinite(mosaic)]
    assert np.isfinite(mosaic).sum() > 0.9 * mosaic.size and finite.min() > 0


def test_changed_settings_redo_every_tile_and_the_seed_reproduces(tmp_path, tif):
    tif("land.tif", np.exp(np.random.default_rng(2).normal(0, 1, (60, 50))))
    keys = dict(tile=30, margin=100.0, buffer_width=50.0, ring_nodes=8, relative_to_uniform=False)
    study = _study(tmp_path, "land.tif", seed=3, **keys)
    first = run_regional(study, workers=0)
    a = _read(tmp_path / "out" / "regional_current.tif")[0]
    assert run_regional(study, workers=0)["regional"]["tiles_up_to_date"] == 4
    _study(tmp_path, "land.tif", seed=4, **keys)
    assert run_regional(study, workers=0)["regional"]["tiles_solved"] == 4
    b = _read(tmp_path / "out" / "regional_current.tif")[0]
    assert not np.allclose(a, b, equal_nan=True)
    _study(tmp_path, "land.tif", seed=3, **keys)
    assert run_regional(study, workers=0)["regional"]["tiles_solved"] == 4
    np.testing.assert_array_equal(_read(tmp_path / "out" / "regional_current.tif")[0], a)
    assert first["settings"]["analyses"]["regional_current"]["seed"] == 3


def test_tiled_map_follows_the_untiled_one(tmp_path, tif):
    """With a margin, the tiled map of a 120 x 120 log-normal landscape correlates closely with the whole map."""
    rng = np.random.default_rng(9)
    tif("land.tif", np.exp(rng.normal(0, 1, (120, 120))))
    maps = {}
    for name, tile in (("whole", 200), ("tiled", 60)):
        folder = tmp_path / name
        folder.mkdir()
        shutil.copy(tmp_path / "land.tif", folder / "land.tif")
        run_regional(_study(folder, "land.tif", tile=tile, margin=300.0, buffer_width=100.0), workers=0)
        maps[name] = _read(folder / "out" / "regional_current.tif")[0]
    r = np.corrcoef(maps["whole"].ravel(), maps["tiled"].ravel())[0, 1]
    assert r > 0.95


def test_check_prints_the_tiling_plan(capsys):
    assert main(["check", str(DEMO / "regional.toml")]) == 0
    out = capsys.readouterr().out
    assert "2 x 3 = 6 tiles of 128 x 128 cells" in out
    assert "about 0.1 GB of memory per task" in out and "32 ring nodes, 31 solves and 496 pairs" in out


@pytest.mark.parametrize("extra,message", [
    ("[patches]\nraster = \"resistance.tif\"\n", r"\[patches\] does not belong in a regional study"),
    ("[analyses.effective_resistance]\n", r"runs on its own, tiled, without patches"),
])
def test_regional_study_refuses_patches_and_other_analyses(demo, extra, message):
    path = _study(demo, "resistance.tif")
    path.write_text(path.read_text() + "\n" + extra)
    with pytest.raises(ConfigError, match=message):
        check_regional(path)


@pytest.mark.parametrize("key,value,message", [
    ("ring_nodes", 1, r"'analyses.regional_current.ring_nodes' = 1: must be 2 or more"),
    ("tile", 4, r"'analyses.regional_current.tile' = 4: must be 16 or more"),
    ("margin", -5.0, r"'analyses.regional_current.margin' = -5.0: must be 0 or more"),
    ("ring_node", 8, r"unknown key 'ring_node'.*Did you mean 'ring_nodes'"),
])
def test_bad_regional_settings_name_the_key(demo, key, value, message):
    with pytest.raises(ConfigError, match=message):
        check_regional(_study(demo, "resistance.tif", **{key: value}))


def test_bad_cells_name_the_tile(tmp_path, tif):
    values = np.ones((40, 40))
    values[30, 35] = -2.0
    tif("bad.tif", values)
    study = _study(tmp_path, "bad.tif", tile=20, margin=0.0, buffer_width=20.0, buffer_value=1.0)
    with pytest.raises(InputError, match=r"tile r0001_c0001 .*resistance <= 0"):
        run_regional(study, workers=0)
    assert not (tmp_path / "out" / "regional_current.tif").exists()


def test_workers_flag_is_only_for_regional_studies(capsys):
    assert main(["run", str(DEMO / "study.toml"), "--workers", "2"]) == 2
    assert "only apply to regional studies" in capsys.readouterr().err


def test_longitude_latitude_tiles_measure_cells_in_metres(tmp_path, tif):
    """A tile of a lon/lat raster is solved on the same metre lengths as the whole raster read by read_grid."""
    values = np.exp(np.random.default_rng(8).normal(0, 1, (30, 40)))
    tif("geo.tif", values, cell=(0.001, 0.001), origin=(10.0, 60.0), crs="EPSG:4326")
    study = _study(tmp_path, "geo.tif", tile=100, buffer_width=0.004, ring_nodes=8, relative_to_uniform=False)
    study, info, plan, extra = regional_plan(study)
    jobs, _, _ = _jobs(study, info, plan, extra, tmp_path)
    flow, _, _ = tile_flow(jobs[0])
    grid = lf.read_grid(tmp_path / "geo.tif")
    assert grid.is_geographic
    expected, _ = lf.analyses.regional.ring_current(grid, buffer_cells=plan.buffer, k=8,
                                                    buffer_value=extra["buffer_value"], offset=jobs[0].offset)
    b = plan.buffer[0]
    np.testing.assert_allclose(flow, expected[b:-b, b:-b], rtol=1e-10)


def test_a_run_stopped_by_sigint_resumes_from_its_finished_tiles(tmp_path, tif):
    """Ctrl-C during the tiles: exit 130, no mosaic; the next run solves only the tiles that were missing."""
    import os
    import signal
    import subprocess
    import sys
    import time
    tif("land.tif", np.exp(np.random.default_rng(6).normal(0, 1, (120, 120))))
    study = _study(tmp_path, "land.tif", tile=30, margin=100.0, buffer_width=50.0, ring_nodes=8)
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    process = subprocess.Popen([sys.executable, "-m", "landflow", "run", str(study), "--workers", "0"], env=env,
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    tiles = tmp_path / "out" / ".landflow-tiles"
    deadline = time.monotonic() + 60
    while len(list(tiles.glob("r*.json"))) < 2 and time.monotonic() < deadline and process.poll() is None:
        time.sleep(0.02)
    process.send_signal(signal.SIGINT)
    _, err = process.communicate(timeout=60)
    assert process.returncode == 130, err
    assert "interrupted" in err
    assert not (tmp_path / "out" / "regional_current.tif").exists()
    finished = len(list(tiles.glob("r*.json")))
    assert 2 <= finished < 16
    resumed = run_regional(study, workers=0)
    assert resumed["regional"]["tiles_up_to_date"] == finished
    assert resumed["regional"]["tiles_solved"] == 16 - finished
    fresh = tmp_path / "fresh"
    fresh.mkdir()
    shutil.copy(tmp_path / "land.tif", fresh / "land.tif")
    run_regional(_study(fresh, "land.tif", tile=30, margin=100.0, buffer_width=50.0, ring_nodes=8), workers=0)
    np.testing.assert_array_equal(_read(tmp_path / "out" / "regional_current.tif")[0],
                                  _read(fresh / "out" / "regional_current.tif")[0])


def test_batch_points_a_regional_study_to_run(capsys):
    assert main(["batch", str(DEMO / "regional.toml"), "--workers", "0"]) == 2
    assert "is a regional study" in capsys.readouterr().err


def test_run_study_points_a_regional_study_to_its_own_runner(demo):
    path = _study(demo, "resistance.tif")
    with pytest.raises(ConfigError, match=r"regional.toml: the study asks for \[analyses.regional_current\], a "
                                          r"regional study solved tile by tile; run it with 'landflow run'"):
        lf.run_study(path)
    assert lf.check_regional(path)[0].endswith("cells of 25 x 25 map units.")


def test_without_dask_the_default_run_solves_here_and_says_so(demo, monkeypatch, caplog):
    import sys
    monkeypatch.setitem(sys.modules, "distributed", None)        # as on a plain install: import fails
    path = _study(demo, "resistance.tif")
    with caplog.at_level("WARNING", logger="landflow"):
        manifest = run_regional(path)
    assert "dask.distributed is not installed, so the tiles are solved in this process" in caplog.text
    # every run's report carries the caution that goes with its results
    report = (Path(manifest["folder"]) / "report.md").read_text()
    assert "decision support alongside field evidence" in report and "6 tile(s) solved in this run" in report
    assert manifest["regional"]["tiles_solved"] == manifest["regional"]["tiles"] == 6     # 2 x 3 tiles of 128
    with pytest.raises(ConfigError, match=r"need dask.distributed; install it with pip install 'landflow\[dask\]'"):
        run_regional(path, workers=2)


def test_local_cluster_workers_get_their_share_of_the_cores():
    # every worker process's own parallel loops (SuperLU's solves, the current sum) use its share of the cores
    pytest.importorskip("distributed")
    import os
    from landflow.regional._run import _local_cluster
    from landflow.solve import cores_per_worker
    client, cluster = _local_cluster(2)
    try:
        seen = client.run(lambda: os.environ.get("LANDFLOW_THREADS"))
    finally:
        client.close()
        cluster.close()
    assert sorted(seen.values()) == [str(cores_per_worker(2))] * 2
