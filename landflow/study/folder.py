"""The output folder of a run: landflow owns what it wrote there, and nothing else.

Rules
-----
* A run writes only to a folder that is new, empty, or was written by landflow
  (it holds a landflow ``manifest.json``). A folder that is, or contains, the
  study file or any input is always refused.
* Inside that folder a run replaces only the files the previous manifest lists;
  every other file is left alone. A new output whose name is already taken by a
  file landflow did not write stops the run before anything is replaced.
* One run at a time: ``.landflow-lock`` in the folder is held with ``flock``
  while a run (or ``landflow check``) works there. The operating system
  releases it when its process dies, so a lock left by a dead run is simply
  taken over.

How a run replaces its outputs
------------------------------
The run writes every new file into ``.landflow-staging-PID/`` inside the folder.
When all of them are written, :meth:`OutputFolder.commit`

1. writes the journal ``.landflow-journal.json`` (atomically): the old and the
   new file lists, the staging and backup folder names and the new run's id;
2. moves every old output (the old ``manifest.json`` last) into
   ``.landflow-backup-PID/``;
3. moves every new output from staging into the folder, ``manifest.json`` last.
   Renaming the new manifest into place is the commit point;
4. removes the backup, the staging folder and then the journal.

SIGINT and SIGTERM are held back during steps 1-4. After a crash at any point,
the next run or ``landflow check`` finds the journal: if the folder's manifest
is the new run's, it finishes step 4 (roll forward); otherwise it removes the
new files that were moved in and moves the backup back (roll back). Staging
folders of dead runs are removed. Either way the folder then holds one complete
set of outputs, and a warning says what was done.
"""

from __future__ import annotations

import errno
import fcntl
import json
import logging
import os
import shutil
import signal
import threading
import uuid
from contextlib import contextmanager
from pathlib import Path

from ..errors import ConfigError

__all__ = ["OutputFolder", "check_output_folder", "is_landflow_manifest", "INTERNAL_PREFIX"]

log = logging.getLogger("landflow")

INTERNAL_PREFIX = ".landflow-"
LOCK = ".landflow-lock"
JOURNAL = ".landflow-journal.json"
MANIFEST = "manifest.json"


def is_landflow_manifest(path):
    """True when ``path`` is a readable JSON manifest written by landflow."""
    try:
        with open(path, encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError):
        return False
    return isinstance(data, dict) and "landflow_version" in data and isinstance(data.get("outputs"), list)


def _contains(folder, path):
    """True when ``path`` is ``folder`` or lies inside it (after resolving links)."""
    path = Path(path).resolve()
    return path == folder or folder in path.parents


def check_output_folder(folder, *, protected=(), source="study", key="output.folder"):
    """Refuse an output folder landflow may not write to; return it resolved.

    Parameters
    ----------
    folder : Path
        The output folder (it need not exist).
    protected : iterable of Path
        The study file and every input: the folder may neither be nor contain any of them.
    source : str
        The study file, for messages.

    Raises
    ------
    ConfigError
        The folder is a file, is or contains the study file or an input, or is
        an existing folder holding files that landflow did not write.
    """
    folder = Path(folder).resolve()
    for path in protected:
        if path is not None and _contains(folder, path):
            raise ConfigError(f"{source}: '{key}' = {str(folder)!r} is, or contains, {path}, which the study "
                              "reads; landflow never writes there. Choose a folder of its own, such as "
                              "'results' beside the study file.")
    if not folder.exists():
        return folder
    if not folder.is_dir():
        raise ConfigError(f"{source}: '{key}' = {str(folder)!r} is an existing file, not a folder. Choose "
                          "another folder or move the file away.")
    entries = sorted(p.name for p in folder.iterdir() if not p.name.startswith(INTERNAL_PREFIX))
    owned = any(p.name.startswith(INTERNAL_PREFIX) for p in folder.iterdir())
    if entries and not owned and not is_landflow_manifest(folder / MANIFEST):
        shown = ", ".join(entries[:3]) + (f" and {len(entries) - 3} more" if len(entries) > 3 else "")
        raise ConfigError(f"{source}: '{key}' = {str(folder)!r} already holds files that landflow did not "
                          f"write ({shown}) and no landflow manifest.json. landflow writes only to a new, "
                          "empty or landflow-written folder: choose another folder, such as 'results', or "
                          "empty this one.")
    return folder


@contextmanager
def _signals_held():
    """Hold back SIGINT and SIGTERM for the block; a signal that came meanwhile is acted on when it ends.

    Python runs signal handlers in the main thread whichever thread the kernel
    delivered the signal to (BLAS and Dask threads do not block signals), so
    blocking them with a signal mask is not enough: the block swaps the Python
    handlers for one that only records the signal, and afterwards puts them
    back and re-raises what was recorded. Outside the main thread (a Dask
    worker thread) handlers cannot be changed, but neither do they run there.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught = []
    held = (signal.SIGINT, signal.SIGTERM)
    previous = {s: signal.signal(s, lambda signum, frame: caught.append(signum)) for s in held}
    try:
        yield
    finally:
        for s, handler in previous.items():
            signal.signal(s, signal.SIG_DFL if handler is None else handler)
        for signum in dict.fromkeys(caught):
            signal.raise_signal(signum)


def _write_json(path, data):
    tmp = path.with_name(path.name + ".tmp")
    with open(tmp, "w", encoding="utf-8") as fh:
        json.dump(data, fh, indent=1)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


def _move(src, dst):
    dst.parent.mkdir(parents=True, exist_ok=True)
    os.replace(src, dst)


def _remove_empty_parents(folder, names):
    """Remove folders inside ``folder`` that held ``names`` and are now empty, deepest first."""
    parents = {p for name in names for p in (folder / name).parents if folder in p.parents}
    for parent in sorted(parents, key=lambda p: len(p.parts), reverse=True):
        try:
            parent.rmdir()
        except OSError:
            pass


class OutputFolder:
    """A locked output folder with a staging area; use as a context manager.

    ``with OutputFolder(path, protected=[...]) as out:`` checks the rules,
    takes the lock, repairs what dead runs left and makes ``out.staging``, the
    folder the run writes into. ``out.commit(names)`` replaces the old outputs
    by the staged ones. Leaving the block without a commit (an error, an
    interrupt) removes the staging folder and leaves the old outputs as they
    were.
    """

    def __init__(self, folder, *, protected=(), source="study", key="output.folder", stage=True):
        self.source, self.key, self.stage = source, key, stage
        self.folder = check_output_folder(folder, protected=protected, source=source, key=key)
        self.protected = list(protected)
        self.run_id = uuid.uuid4().hex
        self.staging = self.folder / f"{INTERNAL_PREFIX}staging-{os.getpid()}"
        self._backup = self.folder / f"{INTERNAL_PREFIX}backup-{os.getpid()}"
        self._lock = None
        self._created = False
        self.repairs = []

    # -- lock ------------------------------------------------------------------
    def _acquire(self):
        if not self.folder.exists():
            self.folder.mkdir(parents=True)
            self._created = True
        path = self.folder / LOCK
        fh = open(path, "a+", encoding="utf-8")
        try:
            fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            if exc.errno not in (errno.EWOULDBLOCK, errno.EACCES, errno.EAGAIN):
                fh.close()
                raise
            fh.seek(0)
            holder = fh.read().strip() or "unknown"
            fh.close()
            raise ConfigError(f"another landflow run (process {holder}) is writing to {self.folder}; wait for it "
                              "to finish, or choose another 'output.folder'.") from None
        fh.seek(0)
        before = fh.read().strip()
        if before and before != str(os.getpid()):
            log.info("took over the lock of %s left by process %s, which is no longer running", self.folder, before)
        fh.seek(0)
        fh.truncate()
        fh.write(str(os.getpid()))
        fh.flush()
        self._lock = fh

    def _release(self):
        if self._lock is None:
            return
        try:
            (self.folder / LOCK).unlink(missing_ok=True)
        finally:
            fcntl.flock(self._lock, fcntl.LOCK_UN)
            self._lock.close()
            self._lock = None

    # -- context ---------------------------------------------------------------
    def __enter__(self):
        self._acquire()
        try:
            self.recover()
            # a repair may have brought back files: the rules hold for what is there now
            check_output_folder(self.folder, protected=self.protected, source=self.source, key=self.key)
            if self.stage:
                self.staging.mkdir()
        except BaseException:
            self._release()
            raise
        return self

    def __exit__(self, *exc):
        try:
            shutil.rmtree(self.staging, ignore_errors=True)
        finally:
            self._release()
            if self._created:
                try:
                    self.folder.rmdir()  # only if the failed run left it empty
                except OSError:
                    pass
        return False

    # -- commit ----------------------------------------------------------------
    def previous_outputs(self):
        """The files the folder's manifest lists (manifest.json included), or [] for a new folder."""
        return _listed(self.folder / MANIFEST)

    def commit(self, names):
        """Replace the previous run's outputs by the staged files ``names`` (manifest.json among them)."""
        names = [n for n in names if n != MANIFEST] + [MANIFEST]
        old = self.previous_outputs()
        old_set = set(old)
        for name in names:
            target = self.folder / name
            if name not in old_set and (target.exists() or target.is_symlink()):
                raise ConfigError(f"{self.folder} holds '{name}', which landflow did not write (the folder's "
                                  f"manifest does not list it) and this run would replace it. Move it away or "
                                  "choose another 'output.folder'; nothing was changed.")
        journal = {"pid": os.getpid(), "run_id": self.run_id, "old": old, "new": names,
                   "staging": self.staging.name, "backup": self._backup.name}
        with _signals_held():
            _write_json(self.folder / JOURNAL, journal)
            try:
                old_first = [n for n in old if n != MANIFEST] + ([MANIFEST] if MANIFEST in old_set else [])
                for name in old_first:
                    if (self.folder / name).exists():
                        _move(self.folder / name, self._backup / name)
                for name in names:
                    _move(self.staging / name, self.folder / name)   # manifest.json last: the commit point
            except BaseException:
                try:   # put the previous outputs back now; if that fails too, the next run will
                    self.recover()
                except Exception:
                    log.warning("%s: could not restore the previous outputs yet; the next landflow run or "
                                "'landflow check' on this folder will", self.folder)
                raise
            self._finish(journal)
        self._created = False

    def _finish(self, journal):
        _remove_empty_parents(self.folder, [n for n in journal["old"] if n not in set(journal["new"])])
        shutil.rmtree(self.folder / journal["backup"], ignore_errors=True)
        shutil.rmtree(self.folder / journal["staging"], ignore_errors=True)
        (self.folder / JOURNAL).unlink(missing_ok=True)

    # -- repair ----------------------------------------------------------------
    def recover(self):
        """Repair what dead runs left (the lock is held); return the list of what was done."""
        done = self._recover_beside()
        journal_path = self.folder / JOURNAL
        if journal_path.exists():
            try:
                journal = json.loads(journal_path.read_text(encoding="utf-8"))
            except (OSError, ValueError):
                journal = None
            if journal is not None:
                done.append(self._repair(journal))
            else:
                journal_path.unlink()
        for leftover in sorted(self.folder.glob(f"{INTERNAL_PREFIX}staging-*")) + \
                sorted(self.folder.glob(f"{INTERNAL_PREFIX}backup-*")):
            if leftover == self.staging:
                continue
            shutil.rmtree(leftover, ignore_errors=True)
            done.append(f"removed {leftover.name}, the unfinished outputs of a run that was stopped "
                        f"(process {leftover.name.rsplit('-', 1)[-1]})")
        for tmp in self.folder.glob(f"{JOURNAL}.tmp"):
            tmp.unlink()
        for line in done:
            log.warning("%s: %s", self.folder, line)
        self.repairs += done
        return done

    def _recover_beside(self):
        """Folders that runs of landflow 0.x left beside the output folder: .NAME.partial-PID, .NAME.old-PID."""
        done = []
        for leftover in sorted(self.folder.parent.glob(f".{self.folder.name}.partial-*")):
            if leftover.is_dir() and not _alive(leftover.name.rsplit("-", 1)[-1]):
                shutil.rmtree(leftover, ignore_errors=True)
                done.append(f"removed {leftover}, the unfinished outputs of a run that was stopped")
        for leftover in sorted(self.folder.parent.glob(f".{self.folder.name}.old-*")):
            if not leftover.is_dir() or _alive(leftover.name.rsplit("-", 1)[-1]):
                continue
            if is_landflow_manifest(self.folder / MANIFEST):
                shutil.rmtree(leftover, ignore_errors=True)
                done.append(f"removed {leftover}, earlier outputs that a finished run had already replaced")
            else:
                for path in sorted(p for p in leftover.rglob("*") if p.is_file()):
                    target = self.folder / path.relative_to(leftover)
                    if not target.exists():
                        _move(path, target)
                shutil.rmtree(leftover, ignore_errors=True)
                done.append(f"restored the previous outputs from {leftover}, left by a run that was stopped")
        return done

    def _repair(self, journal):
        backup = self.folder / journal["backup"]
        manifest = self.folder / MANIFEST
        committed = False
        try:
            committed = json.loads(manifest.read_text(encoding="utf-8")).get("run_id") == journal["run_id"]
        except (OSError, ValueError, AttributeError):
            pass
        pid = journal.get("pid", "unknown")
        if committed:
            self._finish(journal)
            return (f"finished replacing the outputs of the run of process {pid}, which was stopped after its "
                    "new outputs were in place")
        old = set(journal["old"])
        for name in journal["new"]:
            target = self.folder / name
            if target.exists() and (name not in old or (backup / name).exists()):
                target.unlink()
        restored = 0
        for path in sorted(p for p in backup.rglob("*") if p.is_file()) if backup.exists() else []:
            _move(path, self.folder / path.relative_to(backup))
            restored += 1
        self._finish({**journal, "old": [], "new": journal["new"]})
        _remove_empty_parents(self.folder, [n for n in journal["new"] if n not in old])
        return (f"the run of process {pid} was stopped while replacing its outputs; restored the previous "
                f"{restored} file(s) and removed its partial new ones")


def _alive(pid):
    """True when process ``pid`` (text) is running on this machine."""
    try:
        os.kill(int(pid), 0)
    except (ValueError, ProcessLookupError):
        return False
    except PermissionError:
        return True
    return True


def _listed(manifest_path):
    """Outputs a manifest lists, relative names, with manifest.json; [] without a landflow manifest."""
    if not is_landflow_manifest(manifest_path):
        return []
    data = json.loads(Path(manifest_path).read_text(encoding="utf-8"))
    names = [item["file"] for item in data["outputs"] if isinstance(item, dict) and "file" in item]
    names += [n for n in ("report.md",) if n not in names and (Path(manifest_path).parent / n).exists()]
    return [n for n in dict.fromkeys(names) if _safe_name(n)] + [MANIFEST]


def _safe_name(name):
    """A manifest entry names a file inside the folder (no absolute path, no '..')."""
    path = Path(name)
    return not path.is_absolute() and ".." not in path.parts and name not in ("", MANIFEST)
