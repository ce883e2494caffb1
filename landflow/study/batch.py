"""Batches: many studies and sweep runs, on local worker processes or a dask.distributed cluster.

Every study file is expanded and validated first; a file that does not
validate is reported as failed and the rest still run. A run whose output
folder holds a manifest matching its current settings, input hashes and
landflow version, and every output that manifest lists, is skipped. Each run writes into a temporary folder renamed
into place at the end (see :func:`landflow.study.run.run_study`), so a run
that fails or is killed leaves no folder that looks finished.
"""

from __future__ import annotations

import json
import os
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from .. import __version__
from ..errors import ConfigError, LandflowError
from ..io.tables import write_csv
from ..solve import THREADS_VARIABLE, cores_per_worker
from .sweep import expand_study, write_sweep_tables

__all__ = ["RunOutcome", "plan_batch", "run_batch", "is_up_to_date", "Progress", "SUMMARY_COLUMNS"]

SUMMARY_COLUMNS = ["run", "status", "seconds", "folder", "error"]

#: How long to wait for a Dask scheduler to answer.
CONNECT_TIMEOUT = "20s"


@dataclass
class RunOutcome:
    """One row of the batch summary.

    status is "done" (ran and wrote its outputs), "skipped" (its outputs were
    already up to date) or "failed" (``error`` says why).
    """

    run: str
    status: str
    seconds: float
    folder: str
    error: str = ""


def plan_batch(study_files):
    """Expand and validate study files.

    Returns
    -------
    runs : list of StudyRun
        Every valid run, in the order given.
    invalid : list of RunOutcome
        One failed outcome per study file that did not validate.

    Raises
    ------
    ConfigError
        Two runs would write to the same output folder, or no study file was given.
    """
    paths = [Path(p) for p in study_files]
    if not paths:
        raise ConfigError("no study files given; name one or more study files (TOML).")
    stems = [p.stem for p in paths]
    runs, invalid = [], []
    for path, stem in zip(paths, stems):
        name = stem if stems.count(stem) == 1 else str(path.with_suffix("")).replace(os.sep, "/")
        try:
            runs.extend(expand_study(path, name=name))
        except LandflowError as exc:
            invalid.append(RunOutcome(name, "failed", 0.0, "", f"{type(exc).__name__}: {exc}"))
    folders = {}
    for run in runs:
        if run.folder in folders:
            raise ConfigError(f"runs '{folders[run.folder]}' and '{run.name}' would both write to {run.folder}; "
                              "give each study its own 'output.folder'.")
        folders[run.folder] = run.name
    return runs, invalid


def is_up_to_date(study):
    """True when ``study``'s output folder holds a manifest of exactly this study.

    The manifest must record the same landflow version, the same resolved
    settings, and input files (relative to the study file) whose SHA-256 still
    match the files on disk, and every output it lists (report.md included)
    must still be in the folder with the SHA-256 the manifest records.
    """
    from .run import file_sha256

    try:
        manifest = json.loads((study.output_folder / "manifest.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    if manifest.get("landflow_version") != __version__:
        return False
    if manifest.get("settings") != json.loads(json.dumps(study.resolved())):
        return False
    base = study.path.parent if study.path else Path.cwd()
    try:
        for item in manifest.get("outputs", []):
            path = study.output_folder / item["file"]
            if not path.is_file() or file_sha256(path) != item["sha256"]:
                return False
        return all(file_sha256(base / item["path"]) == item["sha256"] for item in manifest.get("inputs", []))
    except (OSError, KeyError, TypeError):
        return False


def execute_run(study):
    """Run one study and report, never raise: the function a worker executes.

    Returns
    -------
    dict
        status ("done" or "failed"), seconds, folder, error.
    """
    from .run import run_study

    started = time.perf_counter()
    try:
        manifest = run_study(study)
        return {"status": "done", "seconds": time.perf_counter() - started, "folder": manifest["folder"],
                "error": ""}
    except Exception as exc:  # a batch reports every failure and carries on
        return {"status": "failed", "seconds": time.perf_counter() - started, "folder": "",
                "error": f"{type(exc).__name__}: {exc}"}


class Progress:
    """One progress display for a batch: runs done, running, failed, elapsed.

    On a terminal a single status line is redrawn in place (finished runs
    are printed above it); elsewhere (a log file, a pipe) each event is one
    plain line.
    """

    def __init__(self, total, stream=None, *, live=None):
        self.stream = stream if stream is not None else sys.stderr
        self.live = self.stream.isatty() if live is None else live
        self.total = total
        self.done = self.failed = self.skipped = self.running = 0
        self.started = time.perf_counter()
        self._last_draw = 0.0

    def _status(self):
        return (f"landflow batch: {self.done + self.skipped}/{self.total} done ({self.skipped} up to date), "
                f"{self.running} running, {self.failed} failed, {self._elapsed()} elapsed")

    def _elapsed(self):
        seconds = int(time.perf_counter() - self.started)
        return f"{seconds // 60:d}:{seconds % 60:02d}"

    def _write(self, text):
        self.stream.write(text)
        self.stream.flush()

    def event(self, outcome):
        """Record a finished run (done, skipped or failed) and show it."""
        if outcome.status != "skipped":
            self.running = max(0, self.running - 1)
        if outcome.status == "done":
            self.done += 1
        elif outcome.status == "skipped":
            self.skipped += 1
        else:
            self.failed += 1
        what = {"done": f"done in {outcome.seconds:.1f} s", "skipped": "up to date, skipped",
                "failed": f"FAILED: {outcome.error}"}[outcome.status]
        line = f"[{self._elapsed()}] {outcome.run}: {what}"
        if self.live:
            self._write("\r\x1b[K" + line + "\n" + self._status())
        else:
            self._write(line + "\n")

    def tick(self, running):
        """Update the number of runs in progress; redraws the live line at most 4 times a second."""
        changed = running != self.running
        self.running = running
        now = time.perf_counter()
        if self.live and (changed or now - self._last_draw > 0.25):
            self._last_draw = now
            self._write("\r\x1b[K" + self._status())
        elif not self.live and changed and running:
            self._write(f"[{self._elapsed()}] {running} running, {self.done + self.skipped} of {self.total} done, "
                        f"{self.failed} failed\n")

    def close(self):
        self.running = 0
        self._write(("\r\x1b[K" if self.live else "") + self._status() + "\n")


def run_batch(study_files, *, workers=None, scheduler=None, client=None, summary=None, force=False,
              stream=None, live=None):
    """Run many studies (and every run of their sweeps), locally or on a Dask cluster.

    Parameters
    ----------
    study_files : list of str or Path
    workers : int, optional
        Local worker processes (default: the number of CPU cores, at most the
        number of runs). 0 runs everything in this process, one after another.
    scheduler : str, optional
        Address of a dask.distributed scheduler (``tcp://host:8786``); runs
        are submitted to that cluster instead of local processes. Its workers
        must be able to import landflow and read the inputs and output
        folders under the same paths.
    client : distributed.Client, optional
        An already connected client (instead of ``scheduler``).
    summary : str or Path, optional
        Where to write the summary table (default ``batch_summary.csv`` in
        the current folder); columns run, status, seconds, folder, error.
    force : bool
        Rerun runs whose outputs are up to date.
    stream : file, optional
        Where progress goes (default standard error).
    live : bool, optional
        Redraw one status line (default: when ``stream`` is a terminal).

    Returns
    -------
    list of RunOutcome
        In the order of the study files and their sweep runs.
    """
    runs, invalid = plan_batch(study_files)
    progress = Progress(len(runs) + len(invalid), stream, live=live)
    outcomes = {}
    for bad in invalid:
        outcomes[bad.run] = bad
        progress.event(bad)
    todo = []
    for run in runs:
        if not force and is_up_to_date(run.study):
            outcomes[run.name] = RunOutcome(run.name, "skipped", 0.0, str(run.folder))
            progress.event(outcomes[run.name])
        else:
            todo.append(run)
    if todo:
        if client is not None or scheduler is not None:
            _run_on_dask(todo, client, scheduler, outcomes, progress)
        elif workers == 0:
            for run in todo:
                progress.tick(1)
                outcomes[run.name] = RunOutcome(run.name, **execute_run(run.study))
                progress.event(outcomes[run.name])
        else:
            n = workers or min(os.cpu_count() or 1, len(todo))
            _run_on_processes(todo, n, outcomes, progress)
    progress.close()
    order = [bad.run for bad in invalid] + [run.name for run in runs]
    ordered = [outcomes[name] for name in order]
    # the summary first: every run's outcome is on disk even if a sweep's comparison cannot be written
    table = pd.DataFrame([{"run": o.run, "status": o.status, "seconds": f"{o.seconds:.3f}", "folder": o.folder,
                           "error": o.error} for o in ordered], columns=SUMMARY_COLUMNS)
    summary = Path(summary) if summary is not None else Path("batch_summary.csv")
    summary.parent.mkdir(parents=True, exist_ok=True)
    write_csv(summary, table)
    write_sweep_tables(runs, {o.run: o.status for o in ordered})
    return ordered


def _collect(pending, slots, outcomes, progress, result_of):
    """Poll futures until all are finished, reporting each as it ends."""
    while pending:
        finished = [f for f in pending if f.done()]
        for future in finished:
            run = pending.pop(future)
            outcomes[run.name] = RunOutcome(run.name, **result_of(future, run))
            progress.event(outcomes[run.name])
        progress.tick(min(len(pending), slots))
        if pending and not finished:
            time.sleep(0.1)


def _lost(exc):
    return {"status": "failed", "seconds": 0.0, "folder": "",
            "error": f"the worker running it was lost: {type(exc).__name__}: {exc}"}


def _worker_start(threads=None):
    """In each local worker: end with the batch process, and clean up on SIGTERM like a single run.

    Linux delivers SIGTERM to the worker when the batch process dies (prctl
    PR_SET_PDEATHSIG); elsewhere a watch thread notices the parent is gone.
    ``threads``: how many threads the worker's own parallel loops use (its share of the cores, so that
    the workers together do not ask for more threads than there are cores).
    """
    import signal
    import threading

    if threads is not None:
        os.environ[THREADS_VARIABLE] = str(threads)

    def stop(signum, frame):
        raise SystemExit(128 + signum)
    signal.signal(signal.SIGTERM, stop)
    parent = os.getppid()
    try:
        import ctypes
        ctypes.CDLL("libc.so.6", use_errno=True).prctl(1, signal.SIGTERM)   # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass
    if os.getppid() != parent:       # the batch died before prctl took effect
        os._exit(143)

    def watch():
        while os.getppid() == parent:
            time.sleep(1.0)
        os.kill(os.getpid(), signal.SIGTERM)
    threading.Thread(target=watch, daemon=True).start()


def _run_on_processes(todo, workers, outcomes, progress):
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    def result_of(future, run):
        try:
            return future.result()
        except Exception as exc:  # a worker process died (killed, out of memory)
            return _lost(exc)

    # spawn: a clean interpreter per worker, safe whatever threads this process holds
    with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"),
                             initializer=_worker_start, initargs=(cores_per_worker(workers),)) as pool:
        pending = {pool.submit(execute_run, run.study): run for run in todo}
        try:
            _collect(pending, workers, outcomes, progress, result_of)
        except BaseException:   # interrupted: drop the queued runs; running ones clean up after themselves
            for process in list(getattr(pool, "_processes", {}).values()):
                process.terminate()          # SIGTERM: each worker removes its unfinished outputs
            pool.shutdown(wait=False, cancel_futures=True)
            raise


def connect(scheduler):
    """A dask.distributed Client for ``scheduler``, with TLS credentials from Dask's own configuration.

    For ``tls://`` addresses the CA file, client certificate and key come from
    the keys ``distributed.comm.tls.ca-file``, ``distributed.comm.tls.client.cert``
    and ``distributed.comm.tls.client.key`` (a Dask config file, or the
    environment variables ``DASK_DISTRIBUTED__COMM__TLS__CA_FILE``, ...).
    """
    from distributed import Client
    from distributed.security import Security

    security = Security()               # reads distributed.comm.tls.* from Dask's configuration
    if str(scheduler).startswith("tls://") and not (security.tls_ca_file and security.tls_client_cert):
        raise ConfigError(f"the scheduler address '{scheduler}' uses TLS, but Dask's configuration names no "
                          "certificates. Set distributed.comm.tls.ca-file, distributed.comm.tls.client.cert and "
                          "distributed.comm.tls.client.key (in a Dask config file or as "
                          "DASK_DISTRIBUTED__COMM__TLS__CA_FILE, ...__CLIENT__CERT and ...__CLIENT__KEY).")
    try:
        return Client(scheduler, timeout=CONNECT_TIMEOUT, security=security)
    except (OSError, ValueError, TypeError) as exc:
        raise ConfigError(f"cannot reach the Dask scheduler at '{scheduler}': {exc}. Check the address "
                          "(for example tls://host:8786), that the scheduler is running, and for TLS that "
                          "the certificates in Dask's configuration are the cluster's.") from None


def _run_on_dask(todo, client, scheduler, outcomes, progress):
    try:
        from distributed import Client
    except ImportError:
        raise ConfigError("running on a Dask cluster needs dask.distributed; install it with "
                          "pip install 'landflow[dask]' (or pip install 'dask[distributed]').") from None
    own = client is None
    if own:
        client = connect(scheduler)
    try:
        slots = max(1, sum(client.nthreads().values()))

        def result_of(future, run):
            try:
                return future.result()
            except Exception as exc:  # the task itself never raises; this is a lost worker
                return _lost(exc)

        pending = {client.submit(execute_run, run.study, key=f"landflow-{run.name}-{time.time_ns()}",
                                 pure=False): run for run in todo}
        try:
            _collect(pending, slots, outcomes, progress, result_of)
        except BaseException:
            client.cancel(list(pending))
            raise
    finally:
        if own:
            client.close()
