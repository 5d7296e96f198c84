"""Run-folder safety: one writer, a completion marker written last, a safe replacement.

No kill can leave a replacement half done.

- **Lock.** A writer of the run folder ``OUT`` (``teffmc fit``, which also builds
  ``OUT.partial``; ``teffmc report``) holds an exclusive :func:`fcntl.flock` on the file
  ``OUT.lock`` beside it; ``teffmc batch`` holds one on ``OUT/.batch-lock``. The holder's
  pid, host, start time and command are written into the lock file, and a second writer
  is refused with one line naming them (:class:`~teffmc.errors.ConfigError`, exit 2).
  The kernel drops the lock when its process ends, however it ends (even ``kill -9``):
  a lock file left behind by a killed process is not a held lock.
- **Marker.** ``complete.json`` is the last file written into a run: the sha256 and size
  of the run's source files (posterior.nc, summary.json, run.toml, log.txt; for a folder
  of several hypotheses or grids, the comparison files and each sub-run's marker) and
  which run is the result (``best``). A folder is finished only when the marker is there
  and every checksum matches (:func:`is_complete`); ``teffmc batch`` skips only such
  folders and :func:`teffmc.posterior.load_run` (``report``, ``compare``) reads only
  such folders. Figures and summary.ecsv are products that ``teffmc report`` redraws,
  so they are listed but not checksummed.
- **Refuse.** Before anything is computed, :func:`check_out_folder` refuses an ``OUT``
  that cannot become a run folder, and :func:`check_replace` a finished or unfinished
  run in ``OUT`` without ``overwrite`` (or ``resume``).
- **Replace.** :func:`install` renames the old run aside (``.OUT.old-<pid>``), renames
  the new one into place, then deletes the old one: at every instant ``OUT`` is either
  the whole old run, absent, or the whole new run.
"""

import fcntl
import glob
import hashlib
import json
import os
import shutil
import socket
import sys
import time
from pathlib import Path

from .errors import ConfigError, DataError

__all__ = ["MARKER", "SOURCES", "RunLock", "run_lock", "batch_lock", "write_marker",
           "check_complete", "is_complete", "finished_run", "finish", "install", "discard",
           "remove_leftovers", "check_out_folder", "check_replace"]

MARKER = "complete.json"
#: files of a single run whose checksums the marker holds (the rest are redrawable)
SOURCES = ("posterior.nc", "summary.json", "run.toml", "log.txt")
PRODUCTS = ("summary.ecsv", "corner.png", "fit.png", "corner.pdf", "fit.pdf", "diagnostics.png",
            "diagnostics.pdf", "budget.png", "budget.pdf", "delta_teff.png", "delta_teff.pdf",
            "table.tex", "table_aastex.tex", "table.csv", "methods.tex", "methods.md",
            "references.bib", "report.html")
_FORMAT = 1


def _sha256(path):
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


# ------------------------------------------------------------------------------ locks

class RunLock:
    """An exclusive, non-blocking :func:`fcntl.flock` on ``path`` (a context manager).

    Parameters
    ----------
    path : path-like
        The lock file (made, with its parent folders, if missing; removed on release).
    folder : path-like
        The folder it protects (named in the refusal).
    key : str
        The command-line option naming that folder (for the refusal).
    """

    def __init__(self, path, folder, key="--out"):
        self.path, self.folder, self.key = Path(path), Path(folder), key
        self.fd, self.made = None, []

    def acquire(self):
        """Take the lock (refused with a ConfigError naming the holder); return self."""
        self.made = [p for p in self.path.parents if not p.exists()][::-1]  # outer first
        self.path.parent.mkdir(parents=True, exist_ok=True)
        while True:
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                holder = _holder(fd)
                os.close(fd)
                self._remove_made()
                raise ConfigError(
                    f"{self.folder} is being written by another teffmc ({holder}); wait "
                    f"for it to end or choose another folder", key=self.key,
                    value=str(self.folder)) from None
            # the previous holder may have removed the file between our open and our
            # lock: then we hold a lock on a file nobody else will ever open; try again
            try:
                same = os.path.samestat(os.stat(self.path), os.fstat(fd))
            except FileNotFoundError:
                same = False
            if same:
                break
            os.close(fd)
        info = {"pid": os.getpid(), "host": socket.gethostname(),
                "since": time.strftime("%Y-%m-%d %H:%M:%S UTC", time.gmtime()),
                "command": " ".join(["teffmc", *sys.argv[1:]])}
        os.ftruncate(fd, 0)
        os.write(fd, json.dumps(info).encode())
        self.fd = fd
        return self

    def release(self):
        """Remove the lock file while held, then drop the lock and the folders made for it."""
        if self.fd is None:
            return
        try:
            self.path.unlink(missing_ok=True)  # while still held: see acquire
        finally:
            os.close(self.fd)
            self.fd = None
        self._remove_made()

    def _remove_made(self):
        for p in reversed(self.made):  # inner first; only folders made for the lock
            try:
                p.rmdir()
            except OSError:
                break
        self.made = []

    def __enter__(self):
        return self.acquire()

    def __exit__(self, *exc):
        self.release()


def _holder(fd):
    """Return the holder's details; it writes them just after it got the lock: wait a moment."""
    for _ in range(50):
        try:
            os.lseek(fd, 0, os.SEEK_SET)
            info = json.loads(os.read(fd, 4096).decode())
            return (f"pid {info['pid']} on {info['host']} since {info['since']}: "
                    f"{info['command']}")
        except (OSError, ValueError, KeyError, TypeError):
            time.sleep(0.02)
    return "its details are not written"


def run_lock(out):
    """Return the lock of the run folder ``out`` (and ``out.partial``): ``out.lock`` beside it."""
    out = Path(out)
    return RunLock(out.with_name(out.name + ".lock"), out)


def batch_lock(out):
    """Return the lock of a batch folder: ``out/.batch-lock`` (no config stem can make it)."""
    out = Path(out)
    return RunLock(out / ".batch-lock", out)


# ----------------------------------------------------------------------------- marker

def _write_atomic(path, text):
    tmp = path.with_name(f".{path.name}.tmp")
    with open(tmp, "w", encoding="utf-8") as f:
        f.write(text)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)


def write_marker(folder, *, sources=None, best="."):
    """Write ``folder/complete.json`` -- the LAST file of a run.

    Parameters
    ----------
    folder : path-like
    sources : sequence of str, optional
        Files (relative to ``folder``) to checksum; default: those of :data:`SOURCES`
        that exist (posterior.nc and summary.json must).
    best : str
        The run that is the result, relative to ``folder`` (``"."``: the folder itself).
    """
    folder = Path(folder)
    if sources is None:
        sources = [s for s in SOURCES if (folder / s).is_file()]
    files = {s: {"sha256": _sha256(folder / s), "bytes": (folder / s).stat().st_size}
             for s in sources}
    from . import __version__

    marker = {"format": _FORMAT, "teffmc": __version__, "best": best, "files": files,
              "products": [p for p in PRODUCTS if (folder / p).is_file()],
              "finished": time.strftime("%Y-%m-%d %H:%M:%S UTC", time.gmtime())}
    _write_atomic(folder / MARKER, json.dumps(marker, indent=1) + "\n")


def _refuse(folder, why):
    raise DataError(f"not a finished teffmc run: {why}", file=str(folder))


def check_complete(folder):
    """Return the run folder holding the result of ``folder`` if it is a finished run.

    That is ``folder`` itself, or its best hypothesis / grid; else raise DataError saying
    why.
    """
    folder = Path(folder)
    if not folder.is_dir():
        _refuse(folder, "no such folder")
    try:
        marker = json.loads((folder / MARKER).read_text(encoding="utf-8"))
        files, best = dict(marker["files"]), str(marker["best"])
    except FileNotFoundError:
        _refuse(folder, f"no completion marker {MARKER} (interrupted, being written, or "
                        "not a run folder)")
    except (OSError, ValueError, KeyError, TypeError, UnicodeDecodeError):
        _refuse(folder, f"unreadable completion marker {MARKER}")
    if marker.get("format") != _FORMAT or not files:
        _refuse(folder, f"completion marker {MARKER} of an unknown format")
    for name, want in files.items():
        p = folder / name
        if not p.is_file():
            _refuse(folder, f"{name} is missing")
        if p.stat().st_size != want.get("bytes") or _sha256(p) != want.get("sha256"):
            _refuse(folder, f"{name} changed after the run finished (checksum mismatch)")
    if best == ".":
        if "posterior.nc" not in files or "summary.json" not in files:
            _refuse(folder, f"completion marker {MARKER} lists no posterior")
        return folder
    sub = folder / best
    if Path(best).is_absolute() or ".." in Path(best).parts or \
            f"{best}/{MARKER}" not in files:
        _refuse(folder, f"completion marker {MARKER} names an unknown best run {best!r}")
    return check_complete(sub)


def is_complete(folder):
    """Return True when ``folder`` holds a finished run (see :func:`check_complete`)."""
    return finished_run(folder) is not None


def finished_run(folder):
    """Return the folder holding the finished result of ``folder``, or None."""
    try:
        return check_complete(folder)
    except DataError:
        return None


# ---------------------------------------------------------------------------- replace

def _aside(out):
    return out.with_name(f".{out.name}.old-{os.getpid()}")


def finish(partial, out):
    """Finish the run built in ``partial`` and put it at ``out``.

    Drop the sampler checkpoint, write the completion marker (the run's last file),
    :func:`install`.
    """
    partial = Path(partial)
    (partial / "chain.h5").unlink(missing_ok=True)
    write_marker(partial)
    install(partial, out)


def install(new, out):
    """Move the finished run ``new`` to ``out``, replacing what is there.

    Rename the old run aside, rename the new one in, delete the old one.
    """
    new, out = Path(new), Path(out)
    old = None
    if out.exists():
        old = _aside(out)
        os.rename(out, old)
    os.rename(new, out)
    if old is not None:
        shutil.rmtree(old)


def discard(out):
    """Remove the folder ``out`` so that no kill leaves part of it under its name."""
    out = Path(out)
    if out.exists():
        old = _aside(out)
        os.rename(out, old)
        shutil.rmtree(old)


def remove_leftovers(out):
    """Delete old runs set aside by a replacement that was killed (call under the lock)."""
    out = Path(out)
    if out.parent.is_dir():
        for p in out.parent.glob(glob.escape(f".{out.name}.old-") + "*"):
            shutil.rmtree(p, ignore_errors=True)


def check_out_folder(out):
    """Refuse an ``--out`` that cannot become a run folder, before anything is computed.

    A path that is not a folder, one whose parent cannot be written (``OUT.partial`` is
    made beside it), or a folder that is not a teffmc run (it would be deleted).
    """
    run_files = (MARKER, "summary.json", "posterior.nc", "log.txt", "compare.json",
                 "stack.json")
    if out.exists() and not out.is_dir():
        raise ConfigError(f"{out} exists and is not a folder: choose another --out",
                          key="--out", value=str(out))
    _check_writable(out.parent, out)
    if out.exists() and any(out.iterdir()) and not any((out / f).exists() for f in run_files):
        raise ConfigError("exists and is not a teffmc run folder; it would be replaced: "
                          "choose another --out", key="--out", value=str(out))


def _check_writable(folder, out):
    """Check that the nearest existing folder on the way to ``folder`` accepts a new folder.

    Tried by making (and removing) a temporary folder: ``os.access`` says yes to root on
    any folder, and on file systems that refuse new entries anyway (/proc, /sys).
    """
    import tempfile

    here = folder
    while not here.exists() and here != here.parent:
        here = here.parent
    if not here.is_dir():
        raise ConfigError(f"cannot make {out}: {here} is not a folder; choose another --out",
                          key="--out", value=str(out))
    try:
        tempfile.TemporaryDirectory(dir=here, prefix=".teffmc-probe-").cleanup()
    except OSError as exc:
        raise ConfigError(f"cannot make {out}: cannot write in {here} ({exc.strerror or exc}); "
                          "choose another --out", key="--out", value=str(out)) from None


def check_replace(out, *, overwrite, resume):
    """Refuse to replace a run in ``out`` unless ``overwrite`` (or ``resume``: continuing it)."""
    if overwrite or resume or not out.is_dir() or not any(out.iterdir()):
        return
    if finished_run(out) is not None:
        raise ConfigError("holds a finished run: give --overwrite to replace it, or choose "
                          "another --out", key="--out", value=str(out))
    raise ConfigError("holds an unfinished run (no valid completion marker): continue it "
                      "with --resume, replace it with --overwrite, or choose another --out",
                      key="--out", value=str(out))
