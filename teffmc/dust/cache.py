"""On-disk cache of precomputed dust tables (``.npz`` files, written atomically).

The directory is ``$TEFFMC_CACHE`` if set, else ``~/.cache/teffmc``. A key is the
SHA-256 of everything the table depends on, including the package versions, so a
stale file is never read; a damaged file is ignored and recomputed.

Tables read or written are also kept in memory (the last :data:`MEMORY_SIZE`, read-only
arrays): a process fitting many stars (a ``teffmc batch`` worker) reads each table
from disk once. :data:`STATS` counts where each :func:`load` was served from.
"""

import hashlib
import os
import tempfile
from collections import OrderedDict
from pathlib import Path

import numpy as np

__all__ = ["cache_dir", "cache_key", "load", "save", "STATS", "MEMORY_SIZE", "forget"]

MEMORY_SIZE = 32
#: loads served from memory ("memory"), from a file ("disk"), or not at all ("miss")
STATS = {"memory": 0, "disk": 0, "miss": 0}
_MEMORY = OrderedDict()


def forget():
    """Empty the in-memory layer (the files stay)."""
    _MEMORY.clear()


def _remember(path, arrays):
    frozen = {}
    for k, v in arrays.items():
        v = np.array(v)  # a copy the caller cannot change
        v.flags.writeable = False
        frozen[k] = v
    _MEMORY[path] = frozen  # by file: another cache folder is another cache
    _MEMORY.move_to_end(path)
    while len(_MEMORY) > MEMORY_SIZE:
        _MEMORY.popitem(last=False)
    return dict(frozen)


def cache_dir():
    """Return the cache directory (not created here).

    Returns
    -------
    pathlib.Path
        ``$TEFFMC_CACHE`` when set and non-empty, else ``~/.cache/teffmc``.
    """
    env = os.environ.get("TEFFMC_CACHE")
    return Path(env).expanduser() if env else Path.home() / ".cache" / "teffmc"


def cache_key(*parts):
    """SHA-256 hex digest of strings, numbers and numpy arrays (their raw bytes).

    Parameters
    ----------
    *parts : str, float, int or numpy.ndarray
        Everything the cached object depends on.

    Returns
    -------
    str
    """
    h = hashlib.sha256()
    for p in parts:
        if isinstance(p, np.ndarray):
            a = np.ascontiguousarray(p)
            h.update(f"{a.dtype.str}{a.shape}".encode())
            h.update(a.tobytes())
        else:
            h.update(repr(p).encode())
        h.update(b"\x00")
    return h.hexdigest()


def _path(kind, key):
    return cache_dir() / f"{kind}-{key[:32]}.npz"


def load(kind, key):
    """Arrays stored under ``key``, or None when absent or unreadable.

    Parameters
    ----------
    kind : str
        File-name prefix, e.g. ``"mie"``.
    key : str
        From :func:`cache_key`.

    Returns
    -------
    dict of numpy.ndarray or None
        Read-only arrays.
    """
    path = _path(kind, key)
    if path in _MEMORY:
        STATS["memory"] += 1
        _MEMORY.move_to_end(path)
        return dict(_MEMORY[path])
    try:
        with np.load(path, allow_pickle=False) as f:
            data = {k: f[k] for k in f.files}
    except (OSError, ValueError, KeyError, EOFError):
        STATS["miss"] += 1
        return None
    if str(data.pop("_key", "")) != key:
        STATS["miss"] += 1
        return None
    STATS["disk"] += 1
    return _remember(path, data)


def save(kind, key, arrays):
    """Write arrays under ``key`` atomically (temporary file + rename).

    Parameters
    ----------
    kind : str
        File-name prefix.
    key : str
        From :func:`cache_key`.
    arrays : dict of numpy.ndarray
        What to store.

    Returns
    -------
    pathlib.Path or None
        The file written, or None when the directory is not writable (the cache
        is an optimisation; failing to write it is not an error).
    """
    path = _path(kind, key)
    _remember(path, arrays)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=path.name, suffix=".tmp")
    except OSError:
        return None
    try:
        with os.fdopen(fd, "wb") as f:
            np.savez(f, _key=np.array(key), **arrays)
        os.replace(tmp, path)
    except OSError:
        Path(tmp).unlink(missing_ok=True)
        return None
    return path
