"""landflow batch: failures reported while the rest finish, reruns skip what is up to date.

The engine is a real dask.distributed LocalCluster of two workers (threads in this process, reached
by the command line over TCP) or real local worker processes; nothing is mocked.
"""

import io
import json

import numpy as np
import pandas as pd
import pytest
import rasterio

from study_fixtures import run_cli, study_text, write_raster, write_study
from landflow.study.batch import Progress, RunOutcome, run_batch

SETTINGS = [
    'resistance = "resistance.tif"',
    'resistance = "resistance.tif"\nneighbours = 4',
    'resistance = "resistance.tif"\nedge_rule = "mean_conductance"',
    'suitability = "suitability.tif"',
    'suitability = "suitability.tif"\nsuitability_transform = "negative_exponential"\nsuitability_shape = 8',
    'suitability = "broken.tif"',       # a value of 1.5 on a 0-1 map: fails inside the run
]


def six_studies(folder):
    with rasterio.open(folder / "suitability.tif") as src:
        broken = src.read(1)
    broken[5, 7] = 1.5
    write_raster(folder / "broken.tif", broken)
    return [write_study(folder / f"study{i}.toml", study_text(keys, folder=f"out{i}"))
            for i, keys in enumerate(SETTINGS)]


def test_batch_on_a_two_worker_local_cluster(landscape):
    distributed = pytest.importorskip("distributed")
    studies = six_studies(landscape)
    summary = landscape / "summary" / "batch_summary.csv"
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, protocol="tcp",
                                  dashboard_address=None) as cluster:
        assert len(cluster.workers) == 2
        # first from Python with a connected client, then through the command line with the address
        stream = io.StringIO()
        with distributed.Client(cluster) as client:
            outcomes = run_batch(studies, client=client, summary=summary, stream=stream)
        assert [o.status for o in outcomes] == ["done"] * 5 + ["failed"]
        table = pd.read_csv(summary, keep_default_na=False)
        assert list(table.columns) == ["run", "status", "seconds", "folder", "error"]
        assert list(table["run"]) == [f"study{i}" for i in range(6)]
        assert list(table["status"]) == ["done"] * 5 + ["failed"]
        assert "InputError" in table["error"][5] and "broken.tif: 1 cell(s) have a suitability outside 0-1" in table["error"][5]
        assert "study5: FAILED: InputError: " in stream.getvalue()
        assert stream.getvalue().splitlines()[-1].startswith("landflow batch: 5/6 done (0 up to date), 0 running, 1 failed")
        for i in range(5):
            assert json.loads((landscape / f"out{i}" / "manifest.json").read_text())["outputs"]
            assert table["folder"][i] == str(landscape / f"out{i}")
        assert not (landscape / "out5").exists()
        assert not [p for p in landscape.iterdir() if ".partial-" in p.name]
        stamps = {i: (landscape / f"out{i}" / "manifest.json").stat().st_mtime_ns for i in range(5)}

        # fix the broken input: the rerun does only that run
        with rasterio.open(landscape / "suitability.tif") as src:
            write_raster(landscape / "broken.tif", src.read(1))
        args = ["batch", *studies, "--scheduler", cluster.scheduler_address, "--summary", summary]
        second = run_cli(*args, cwd=landscape)
        assert second.returncode == 0, second.stderr
        assert "1 done, 5 up to date, 0 failed" in second.stdout
        table = pd.read_csv(summary, keep_default_na=False)
        assert list(table["status"]) == ["skipped"] * 5 + ["done"]
        assert (landscape / "out5" / "manifest.json").exists()
        assert stamps == {i: (landscape / f"out{i}" / "manifest.json").stat().st_mtime_ns for i in range(5)}
    # the fixed study now equals study3 (same suitability values, same settings)
    a = pd.read_csv(landscape / "out3" / "effective_resistance.csv")
    b = pd.read_csv(landscape / "out5" / "effective_resistance.csv")
    np.testing.assert_array_equal(a["resistance"], b["resistance"])


def test_sweep_on_local_processes_writes_the_comparison_table(landscape):
    study = write_study(landscape / "sweep.toml", study_text(
        'suitability = "suitability.tif"\nsuitability_transform = "negative_exponential"', folder="swept") + """
    [sweep]
    "landscape.suitability_shape" = [0.5, 8]
    landscape.neighbours = [4, 8]
    """)
    run_batch([study], workers=2, summary=landscape / "batch_summary.csv", stream=io.StringIO())
    summary = pd.read_csv(landscape / "batch_summary.csv", keep_default_na=False)
    names = ["suitability_shape-0.5_neighbours-4", "suitability_shape-0.5_neighbours-8",
             "suitability_shape-8_neighbours-4", "suitability_shape-8_neighbours-8"]
    assert list(summary["run"]) == [f"sweep/{n}" for n in names]
    assert set(summary["status"]) == {"done"}
    table = pd.read_csv(landscape / "swept" / "sweep_effective_resistance.csv")
    assert list(table.columns) == ["run", "patch_a", "patch_b", "resistance"]
    assert list(table["run"].unique()) == names and len(table) == 4 * 6
    for name in names:
        own = pd.read_csv(landscape / "swept" / name / "effective_resistance.csv")
        # the same numbers through two CSV files: pandas' default float parser may differ in the last bit
        np.testing.assert_allclose(table.loc[table["run"] == name, "resistance"], own["resistance"], rtol=1e-15)
        manifest = json.loads((landscape / "swept" / name / "manifest.json").read_text())
        assert manifest["sweep"]["landscape.neighbours"] == int(name[-1])
    # Rayleigh monotonicity (Doyle & Snell 1984, section 1.4, from memory): dropping the diagonal edges
    # (4 instead of 8 neighbours) removes conductances, so no effective resistance may fall
    wide = table.set_index(["run", "patch_a", "patch_b"])["resistance"]
    for c in ("0.5", "8"):
        four = wide[f"suitability_shape-{c}_neighbours-4"].to_numpy()
        eight = wide[f"suitability_shape-{c}_neighbours-8"].to_numpy()
        assert (four > eight).all()
    runs = pd.read_csv(landscape / "swept" / "sweep_runs.csv")
    assert list(runs.columns) == ["run", "status", "folder", "landscape.suitability_shape", "landscape.neighbours"]


def test_invalid_study_is_reported_and_the_rest_run(landscape, tmp_path):
    good = write_study(landscape / "good.toml", study_text(folder="good"))
    bad = write_study(landscape / "bad.toml", study_text('resistence = "resistance.tif"', folder="bad"))
    stream = io.StringIO()
    outcomes = run_batch([bad, good], workers=0, summary=tmp_path / "s.csv", stream=stream)
    assert [(o.run, o.status) for o in outcomes] == [("bad", "failed"), ("good", "done")]
    assert "unknown key 'resistence' in [landscape]. Did you mean 'resistance'?" in outcomes[0].error
    assert "bad: FAILED: ConfigError" in stream.getvalue()
    # a rerun after the input changes redoes the run; a setting change too; otherwise it is skipped
    assert run_batch([good], workers=0, summary=tmp_path / "s.csv", stream=stream)[0].status == "skipped"
    with rasterio.open(landscape / "resistance.tif") as src:
        write_raster(landscape / "resistance.tif", src.read(1) * 2)
    assert run_batch([good], workers=0, summary=tmp_path / "s.csv", stream=stream)[0].status == "done"
    write_study(good, study_text(folder="good", extra="pair_current_maps = true"))
    assert run_batch([good], workers=0, summary=tmp_path / "s.csv", stream=stream)[0].status == "done"
    assert run_batch([good], workers=0, summary=tmp_path / "s.csv", stream=stream)[0].status == "skipped"
    # an output deleted since the last run: not up to date
    (landscape / "good" / "current_density.tif").unlink()
    assert run_batch([good], workers=0, summary=tmp_path / "s.csv", stream=stream)[0].status == "done"
    assert (landscape / "good" / "current_density.tif").is_file()


def test_two_runs_sharing_an_output_folder_are_refused(landscape, tmp_path):
    a = write_study(landscape / "a.toml", study_text(folder="same"))
    b = write_study(landscape / "b.toml", study_text(folder="same", extra="pair_current_maps = true"))
    with pytest.raises(ValueError, match=r"runs 'a' and 'b' would both write to .*same; give each study its own"):
        run_batch([a, b], workers=0, summary=tmp_path / "s.csv", stream=io.StringIO())


class TestProgress:
    def test_plain_lines_when_not_a_terminal(self):
        out = io.StringIO()
        p = Progress(3, out)
        p.tick(2)
        p.event(RunOutcome("a", "done", 1.25, "/x"))
        p.event(RunOutcome("b", "failed", 0.5, "", "InputError: bad"))
        p.close()
        lines = out.getvalue().splitlines()
        assert "\r" not in out.getvalue()
        assert lines[0].endswith("2 running, 0 of 3 done, 0 failed")
        assert lines[1].endswith("a: done in 1.2 s") and lines[2].endswith("b: FAILED: InputError: bad")
        assert lines[-1].startswith("landflow batch: 1/3 done (0 up to date), 0 running, 1 failed, 0:0")

    def test_one_redrawn_line_on_a_terminal(self):
        out = io.StringIO()
        p = Progress(2, out, live=True)
        p.tick(1)
        p.event(RunOutcome("a", "skipped", 0.0, "/x"))
        p.close()
        text = out.getvalue()
        assert text.count("\n") == 2             # the finished run, then the final status
        assert "\r\x1b[K" in text and "1 running" in text and "a: up to date, skipped" in text


@pytest.mark.parametrize("address, message", [("tcp://127.0.0.1:1", "Timed out"), ("foo://x:1", "unknown address scheme")])
def test_unreachable_scheduler(landscape, tmp_path, monkeypatch, address, message):
    pytest.importorskip("distributed")
    import landflow.study.batch as batch
    monkeypatch.setattr(batch, "CONNECT_TIMEOUT", "1s")
    study = write_study(landscape / "a.toml", study_text())
    with pytest.raises(ValueError, match=rf"cannot reach the Dask scheduler at '{address}': .*{message}.*Check the "
                                         r"address"):
        run_batch([study], scheduler=address, summary=tmp_path / "s.csv", stream=io.StringIO())


def test_batch_on_a_tls_cluster_with_credentials_from_dask_configuration(landscape, tmp_path):
    """A LocalCluster that speaks only TLS, with certificates made for the test (distributed's
    Security.temporary, which uses the cryptography package); the command line finds the client's
    credentials in Dask's configuration, here its environment variables."""
    distributed = pytest.importorskip("distributed")
    pytest.importorskip("cryptography")
    from distributed.security import Security
    security = Security.temporary()
    files = {}
    for name, pem in [("ca", security.tls_ca_file), ("cert", security.tls_client_cert),
                      ("key", security.tls_client_key)]:
        files[name] = tmp_path / f"{name}.pem"
        files[name].write_text(pem)
    study = write_study(landscape / "a.toml", study_text(folder="tls_out"))
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, protocol="tls",
                                  security=security, dashboard_address=None) as cluster:
        assert cluster.scheduler_address.startswith("tls://")
        args = ["batch", study, "--scheduler", cluster.scheduler_address, "--summary", tmp_path / "s.csv"]
        without = run_cli(*args, cwd=landscape)
        assert without.returncode == 1 and "Traceback" not in without.stderr
        assert "uses TLS, but Dask's configuration names no certificates" in without.stderr
        env = {"DASK_DISTRIBUTED__COMM__TLS__CA_FILE": str(files["ca"]),
               "DASK_DISTRIBUTED__COMM__TLS__CLIENT__CERT": str(files["cert"]),
               "DASK_DISTRIBUTED__COMM__TLS__CLIENT__KEY": str(files["key"])}
        done = run_cli(*args, cwd=landscape, env=env)
        assert done.returncode == 0, done.stderr
        assert "1 done" in done.stdout
    assert json.loads((landscape / "tls_out" / "manifest.json").read_text())["outputs"]
