"""The output folder: landflow writes only where it may, replaces only what it wrote, and survives crashes.

Failure injection: every rename of a commit is made to kill the process in turn (a real crash: os._exit,
no cleanup), every write of a run is made to fail in turn, and real runs are killed with SIGKILL, SIGTERM
and SIGINT. After each, the folder must hold one complete set of outputs (the old or the new) once the
next run or check has repaired it.
"""

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import landflow as lf
from landflow.errors import ConfigError
from landflow.study import folder as folder_module
from landflow.study.batch import is_up_to_date
from landflow.study.config import load_study
from landflow.study.folder import OutputFolder
from study_fixtures import ROOT, make_landscape, run_cli, study_text, write_raster, write_study

FEW = """
[landscape]
resistance = "resistance.tif"

[patches]
raster = "patches.tif"

[output]
folder = "{folder}"
quicklooks = false

[analyses.effective_resistance]
{extra}
"""


def few_study(path, folder="results", extra=""):
    path.write_text(FEW.format(folder=folder, extra=extra), encoding="utf-8")
    return path


def snapshot(folder):
    """{relative name: sha256} of every file below ``folder`` (hidden internals included)."""
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(Path(folder).rglob("*")) if p.is_file()}


def listed(folder):
    manifest = json.loads((Path(folder) / "manifest.json").read_text(encoding="utf-8"))
    return {item["file"]: item["sha256"] for item in manifest["outputs"]}


def assert_complete(folder):
    """The folder holds exactly one run's outputs, each with its recorded hash, and no internals."""
    for name, digest in listed(folder).items():
        assert hashlib.sha256((Path(folder) / name).read_bytes()).hexdigest() == digest, name
    assert not [p.name for p in Path(folder).iterdir() if p.name.startswith(".landflow-")]
    return json.loads((Path(folder) / "manifest.json").read_text(encoding="utf-8"))["run_id"]


@pytest.fixture
def landscape(tmp_path):
    return make_landscape(tmp_path)


# -- where a run may write ------------------------------------------------------------------------------------
def test_a_users_file_survives_every_rerun_untouched(landscape):
    study = few_study(landscape / "s.toml", extra="[analyses.current_density]\npair_current_maps = true")
    lf.run_study(study)
    notes = landscape / "results" / "field_notes.txt"
    notes.write_bytes(b"pond 3 dry in August\n")
    (landscape / "results" / "pair_maps" / "mine.txt").write_text("keep me")
    few_study(study)                                  # fewer outputs: the pair maps go
    lf.run_study(study)
    assert notes.read_bytes() == b"pond 3 dry in August\n"
    assert (landscape / "results" / "pair_maps" / "mine.txt").read_text() == "keep me"
    assert not (landscape / "results" / "pair_maps" / "1-2").exists()      # old outputs removed
    assert_complete(landscape / "results")


def test_a_folder_landflow_did_not_write_is_refused_by_run_and_check(landscape):
    (landscape / "results").mkdir()
    (landscape / "results" / "field_notes.txt").write_text("mine")
    study = few_study(landscape / "s.toml")
    for call in (lf.run_study, lf.check_study):
        with pytest.raises(ConfigError, match=r"already holds files that landflow did not write "
                                              r"\(field_notes\.txt\) and no landflow manifest\.json.*choose "
                                              r"another folder"):
            call(study)
    assert snapshot(landscape / "results") == {"field_notes.txt": hashlib.sha256(b"mine").hexdigest()}


@pytest.mark.parametrize("folder", [".", "..", "ABSOLUTE", "LINK"])
def test_a_folder_holding_the_study_or_its_inputs_is_always_refused(landscape, folder):
    if folder == "ABSOLUTE":
        folder = str(landscape)
    elif folder == "LINK":
        (landscape.parent / "link").symlink_to(landscape, target_is_directory=True)
        folder = "../link"
    study = few_study(landscape / "s.toml", folder=folder)
    before = snapshot(landscape)
    result = run_cli("run", study)
    assert result.returncode == 1 and "Traceback" not in result.stderr
    assert "is, or contains," in result.stderr and "landflow never writes there" in result.stderr
    assert run_cli("check", study).returncode == 1
    assert snapshot(landscape) == before


def test_an_input_inside_the_output_folder_is_refused(landscape):
    (landscape / "data").mkdir()
    (landscape / "resistance.tif").rename(landscape / "data" / "resistance.tif")
    study = few_study(landscape / "s.toml", folder="data")
    study.write_text(study.read_text().replace('"resistance.tif"', '"data/resistance.tif"'))
    with pytest.raises(ConfigError, match=r"data/resistance\.tif, which the study reads"):
        lf.check_study(study)


def test_a_new_output_never_replaces_a_file_landflow_did_not_write(landscape):
    study = few_study(landscape / "s.toml")
    lf.run_study(study)
    mine = landscape / "results" / "effective_resistance_matrix.csv"
    manifest = json.loads((landscape / "results" / "manifest.json").read_text())
    manifest["outputs"] = [o for o in manifest["outputs"] if o["file"] != mine.name]
    (landscape / "results" / "manifest.json").write_text(json.dumps(manifest))   # now the user's file
    mine.write_text("my own table")
    before = snapshot(landscape / "results")
    with pytest.raises(ConfigError, match=r"holds 'effective_resistance_matrix\.csv', which landflow did not "
                                          r"write .* nothing was changed"):
        lf.run_study(study)
    assert snapshot(landscape / "results") == before


# -- one run at a time --------------------------------------------------------------------------------------
def test_a_second_run_on_a_locked_folder_stops_at_once(landscape):
    study = few_study(landscape / "s.toml")
    lf.run_study(study)
    with OutputFolder(landscape / "results", stage=False):
        started = time.monotonic()
        result = run_cli("run", study)
        assert time.monotonic() - started < 30
    assert result.returncode == 1
    assert f"another landflow run (process {os.getpid()}) is writing to {landscape / 'results'}" in result.stderr


def test_a_stale_lock_of_a_dead_process_is_taken_over(landscape, caplog):
    study = few_study(landscape / "s.toml")
    lf.run_study(study)
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    (landscape / "results" / ".landflow-lock").write_text(str(dead.pid))
    with caplog.at_level("INFO", logger="landflow"):
        lf.run_study(study)
    assert f"left by process {dead.pid}, which is no longer running" in caplog.text
    assert_complete(landscape / "results")


# -- failures at every write and every rename ----------------------------------------------------------------
def test_each_write_failing_in_turn_leaves_the_old_outputs(landscape, monkeypatch):
    from landflow.study import run as run_module
    calls = {"n": 0, "fail_at": None}

    def failing(real):
        def write(*args, **kwargs):
            calls["n"] += 1
            if calls["n"] == calls["fail_at"]:
                raise OSError(28, "No space left on device", str(args[0]))
            return real(*args, **kwargs)
        return write
    for name in ("write_geotiff", "write_csv"):
        monkeypatch.setattr(run_module, name, failing(getattr(run_module, name)))
    study = few_study(landscape / "s.toml", extra="[analyses.current_density]\npair_current_maps = true\n"
                                                  "pair_voltage_maps = true")
    lf.run_study(study)                               # counts the writes of the new run
    writes = calls["n"]
    assert writes == 15                               # 2 tables, the density map, 6 pairs x 2 maps
    few_study(study, extra="[analyses.current_density]")
    lf.run_study(study)
    old = snapshot(landscape / "results")
    few_study(study, extra="[analyses.current_density]\npair_current_maps = true\npair_voltage_maps = true")
    for fail_at in range(1, writes + 1):
        calls.update(n=0, fail_at=fail_at)
        with pytest.raises(OSError, match="No space left"):
            lf.run_study(study)
        assert snapshot(landscape / "results") == old, fail_at


CRASH = """
import os, sys, shutil
from landflow.study import folder
calls = {"replace": 0, "rmtree": 0}
real_replace, real_rmtree = os.replace, shutil.rmtree
what, at = sys.argv[2], int(sys.argv[3])
def replace(src, dst):
    calls["replace"] += 1
    if what == "replace" and calls["replace"] == at:
        os._exit(9)                 # a crash: no cleanup of any kind
    return real_replace(src, dst)
def rmtree(path, *args, **kwargs):
    calls["rmtree"] += 1
    if what == "rmtree" and calls["rmtree"] == at:
        os._exit(9)
    return real_rmtree(path, *args, **kwargs)
os.replace, shutil.rmtree = replace, rmtree
import landflow
landflow.run_study(sys.argv[1])
print(calls["replace"], calls["rmtree"])
"""


def crash_run(study, what, at):
    env = {"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin", "HOME": str(study.parent)}
    return subprocess.run([sys.executable, "-c", CRASH, str(study), what, str(at)], env=env,
                          capture_output=True, text=True, timeout=120)


def test_a_crash_at_each_rename_is_repaired_by_the_next_check(landscape):
    """Every os.replace of a run (the staged writes, the journal, each move out and in) and each removal
    after the commit point is made to crash the process in turn."""
    study = few_study(landscape / "s.toml")
    lf.run_study(study)
    (landscape / "results" / "field_notes.txt").write_text("mine")
    few_study(study, extra="[analyses.current_density]")     # the new run has other outputs too
    count = crash_run(study, "none", 0)
    assert count.returncode == 0, count.stderr
    renames, removals = map(int, count.stdout.split())
    assert renames >= 10 and removals >= 2                   # writes, journal, old files out, new files in
    outcomes = []
    for what, at in [("replace", i) for i in range(1, renames + 1)] + [("rmtree", i) for i in (1, 2)]:
        few_study(study)
        lf.run_study(study)                                  # back to the old set of outputs
        few_study(study, extra="[analyses.current_density]")
        crashed = crash_run(study, what, at)
        assert crashed.returncode == 9, crashed.stderr
        lf.check_study(study)                                # finds and repairs what the crash left
        assert_complete(landscape / "results")
        outcomes.append("new" if "current_density.tif" in listed(landscape / "results") else "old")
        assert (landscape / "results" / "field_notes.txt").read_text() == "mine"
    # crashes up to the commit point (the last rename) roll back; after it, the new set stays
    assert outcomes == ["old"] * renames + ["new", "new"]


HELD = """
import os, signal, sys, threading, time
from pathlib import Path
from landflow.study import folder


class Stop(BaseException):
    pass


def stop(signum, frame):
    raise Stop()


signal.signal(signal.SIGTERM, stop)
threading.Thread(target=time.sleep, args=(30,), daemon=True).start()   # as BLAS or Dask threads would be
real_move, moves = folder._move, []


def move(src, dst):
    moves.append(dst.name)
    if len(moves) == 1:
        os.kill(os.getpid(), signal.SIGTERM)
        time.sleep(0.05)            # ample time for the handler to run if nothing held it back
    real_move(src, dst)


folder._move = move
out_folder = Path(sys.argv[1])
try:
    with folder.OutputFolder(out_folder) as out:
        names = ["a.txt", "b.txt", "manifest.json"]
        for name in names[:2]:
            (out.staging / name).write_text(name)
        (out.staging / "manifest.json").write_text('{"landflow_version": "0", "outputs": [{"file": "a.txt"}, '
                                                   '{"file": "b.txt"}]}')
        out.commit(names)
except Stop:
    print("stopped after", moves, sorted(p.name for p in out_folder.iterdir()))
"""


def test_sigterm_during_a_commit_waits_for_its_end_even_with_other_threads(tmp_path):
    """A signal mask alone does not hold a signal back when another thread exists (Python runs the handler
    in the main thread whichever thread received it); the commit must still finish first."""
    env = {"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"}
    result = subprocess.run([sys.executable, "-c", HELD, str(tmp_path / "out")], env=env, capture_output=True,
                            text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "stopped after ['a.txt', 'b.txt', 'manifest.json'] " \
                                    "['a.txt', 'b.txt', 'manifest.json']"


# -- real runs stopped from outside ------------------------------------------------------------------------------
def slow_landscape(folder):
    rng = np.random.default_rng(7)
    write_raster(folder / "resistance.tif", np.exp(rng.normal(0, 0.5, (90, 90))))
    labels = np.zeros((90, 90), dtype=np.uint8)
    for label, (r, c) in enumerate([(5, 5), (5, 84), (84, 5), (84, 84), (45, 45), (5, 45), (45, 5)], start=1):
        labels[r - 1:r + 2, c - 1:c + 2] = label
    write_raster(folder / "patches.tif", labels, dtype="uint8", nodata=0)
    # 21 pairs x 2 maps: the run spends a while writing before its manifest
    return write_study(folder / "s.toml", study_text(folder="results",
                                                     extra="pair_current_maps = true\npair_voltage_maps = true"))


def start_run(study):
    env = {"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin", "HOME": str(study.parent)}
    return subprocess.Popen([sys.executable, "-m", "landflow", "run", "-q", str(study)], env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)


def stop_once_writing(proc, folder, signum, timeout=90):
    """Send ``signum`` as soon as the run's staging folder holds a first output file."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        staging = list(folder.glob(".landflow-staging-*")) if folder.exists() else []
        if staging and any(f.is_file() for f in staging[0].rglob("*")):
            os.kill(proc.pid, signum)
            proc.wait(timeout=60)
            return staging[0]
        assert proc.poll() is None, f"the run ended before it could be stopped: {proc.stderr.read()}"
        time.sleep(0.002)
    proc.kill()
    raise AssertionError("the run never started writing")


def test_a_killed_first_run_leaves_nothing_that_looks_finished(tmp_path):
    study = slow_landscape(tmp_path)
    proc = start_run(study)
    stop_once_writing(proc, tmp_path / "results", signal.SIGKILL)
    assert proc.returncode == -signal.SIGKILL
    assert not list(tmp_path.rglob("manifest.json"))
    summary = lf.check_study(study)                          # repairs: removes the dead run's staging
    assert summary["patches"] == 7
    assert not (tmp_path / "results").exists() or not [p for p in (tmp_path / "results").iterdir()
                                                        if p.name != ".landflow-lock"]


@pytest.mark.parametrize("signum, code, word", [(signal.SIGTERM, 143, "terminated"),
                                                (signal.SIGINT, 130, "interrupted")])
def test_sigterm_and_sigint_clean_up_and_print_one_line(tmp_path, signum, code, word):
    study = slow_landscape(tmp_path)
    finished = run_cli("run", "-q", study)
    assert finished.returncode == 0, finished.stderr
    before = snapshot(tmp_path / "results")
    write_study(study, study_text('resistance = "resistance.tif"\nneighbours = 4', folder="results",
                                  extra="pair_current_maps = true\npair_voltage_maps = true"))
    proc = start_run(study)
    stop_once_writing(proc, tmp_path / "results", signum)
    err = proc.stderr.read()
    assert proc.returncode == code, err
    assert err.strip().splitlines() == [f"landflow: {word}; unfinished outputs were removed and earlier "
                                        "results left as they were."]
    assert snapshot(tmp_path / "results") == before
    assert not is_up_to_date(load_study(study))             # so a batch rerun redoes it


# -- the manifest lets anyone verify a folder ------------------------------------------------------------------
def test_verify_finds_edited_and_deleted_outputs(landscape):
    study = few_study(landscape / "s.toml")
    lf.run_study(study)
    assert is_up_to_date(load_study(study))
    ok = run_cli("verify", landscape / "results")
    assert ok.returncode == 0 and "every output" in ok.stdout
    with open(landscape / "results" / "report.md", "a") as fh:
        fh.write("edited\n")
    (landscape / "results" / "effective_resistance_matrix.csv").unlink()
    bad = run_cli("verify", landscape / "results")
    assert bad.returncode == 1
    assert "changed since the run: report.md" in bad.stderr
    assert "missing: effective_resistance_matrix.csv" in bad.stderr
    assert not is_up_to_date(load_study(study))


def _alive(pid):
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc to find the worker processes")
def test_batch_workers_end_when_the_batch_process_is_killed(tmp_path):
    study = slow_landscape(tmp_path)
    env = {"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin", "HOME": str(tmp_path)}
    batch = subprocess.Popen([sys.executable, "-m", "landflow", "batch", str(study), "--workers", "1",
                              "--summary", str(tmp_path / "s.csv")], env=env, stdout=subprocess.DEVNULL,
                             stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 60
    workers = []
    while time.monotonic() < deadline and not workers:
        staging = list((tmp_path / "results").glob(".landflow-staging-*")) if (tmp_path / "results").exists() else []
        if staging:
            workers = [int(p.name.rsplit("-", 1)[1]) for p in staging]
        time.sleep(0.01)
    assert workers, "the batch never started its run"
    batch.kill()                               # no chance to clean up or to tell its workers
    batch.wait()
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline and any(_alive(w) for w in workers):
        time.sleep(0.05)
    assert not any(_alive(w) for w in workers)
    assert not list((tmp_path / "results").glob(".landflow-staging-*"))    # the worker cleaned up on its way out


def test_a_full_disk_is_reported_naming_the_output_and_the_fix(landscape, monkeypatch):
    # GDAL reports a failed write as "Write failed" with no file name; the run names the output
    from rasterio.errors import RasterioIOError
    from landflow.study import run as run_module

    def full(*args, **kwargs):
        raise RasterioIOError("Write failed")
    monkeypatch.setattr(run_module, "write_geotiff", full)
    study = few_study(landscape / "s.toml", extra="[analyses.current_density]")
    with pytest.raises(OSError, match=r"could not write the output current_density\.tif: Write failed\. Free "
                                      r"space on the output folder's disk"):
        lf.run_study(study)
    assert not (landscape / "results").exists()          # nothing half-written where the outputs would be
