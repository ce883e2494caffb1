"""A run killed mid-way leaves no folder that looks finished, and an earlier finished run intact."""

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np

from study_fixtures import ROOT, study_text, write_raster, write_study
from landflow.study.batch import is_up_to_date
from landflow.study.config import load_study


def start_run(study):
    env = {"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin", "HOME": str(study.parent)}
    return subprocess.Popen([sys.executable, "-m", "landflow", "run", "-q", str(study)], env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)


def kill_once_writing(proc, parent, timeout=90):
    """SIGKILL the run as soon as its temporary folder holds a first output file."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        partial = [p for p in parent.iterdir() if ".partial-" in p.name and p.is_dir()]
        if partial and any(f.is_file() for f in partial[0].rglob("*")):
            os.kill(proc.pid, signal.SIGKILL)
            proc.wait()
            return partial[0]
        assert proc.poll() is None, f"the run ended before it could be interrupted: {proc.stderr.read()}"
        time.sleep(0.002)
    proc.kill()
    raise AssertionError("the run never started writing")


def test_killed_run_leaves_no_finished_looking_folder(tmp_path):
    rng = np.random.default_rng(7)
    write_raster(tmp_path / "resistance.tif", np.exp(rng.normal(0, 0.5, (90, 90))))
    labels = np.zeros((90, 90), dtype=np.uint8)
    for label, (r, c) in enumerate([(5, 5), (5, 84), (84, 5), (84, 84), (45, 45), (5, 45), (45, 5)], start=1):
        labels[r - 1:r + 2, c - 1:c + 2] = label
    write_raster(tmp_path / "patches.tif", labels, dtype="uint8", nodata=0)
    # 21 pairs x 2 maps: the run spends a while writing before its manifest
    slow = "pair_current_maps = true\npair_voltage_maps = true"
    study = write_study(tmp_path / "s.toml", study_text(folder="results", extra=slow))

    proc = start_run(study)
    partial = kill_once_writing(proc, tmp_path)
    assert proc.returncode == -signal.SIGKILL
    assert not (tmp_path / "results").exists()
    assert not (partial / "manifest.json").exists() and partial.name.startswith(".results.partial-")
    assert not [p for p in tmp_path.rglob("manifest.json")]

    # finish a run, then kill a rerun with other settings: the finished folder is untouched
    finished = subprocess.run([sys.executable, "-m", "landflow", "run", "-q", str(study)],
                              env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"}, capture_output=True)
    assert finished.returncode == 0, finished.stderr
    before = {p.name: p.read_bytes() for p in (tmp_path / "results").glob("*.csv")}
    manifest = (tmp_path / "results" / "manifest.json").read_bytes()
    write_study(study, study_text('resistance = "resistance.tif"\nneighbours = 4', folder="results", extra=slow))
    assert load_study(study).settings["landscape"]["neighbours"] == 4
    proc = start_run(study)
    kill_once_writing(proc, tmp_path)
    assert (tmp_path / "results" / "manifest.json").read_bytes() == manifest
    assert before == {p.name: p.read_bytes() for p in (tmp_path / "results").glob("*.csv")}
    assert json.loads(manifest)["settings"]["landscape"]["neighbours"] == 8
    assert not is_up_to_date(load_study(study))     # so a batch rerun redoes it
