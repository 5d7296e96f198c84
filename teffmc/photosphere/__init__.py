"""Photosphere models: grid files, interpolation, blackbody, built-in synthesis."""

import os
from functools import lru_cache
from importlib.resources import files
from pathlib import Path

from ..errors import GridError
from .blackbody import BlackbodyGrid, planck_surface_flux
from .grid import Grid

__all__ = ["Grid", "BlackbodyGrid", "load_grid", "planck_surface_flux", "builtin_grid_path",
           "grid_cache_info"]


def builtin_grid_path():
    """Path of the built-in grid file shipped in the package data."""
    return Path(str(files("teffmc") / "data" / "grid" / "builtin.h5"))


@lru_cache(maxsize=4)
def _read(path, mtime_ns):
    """Read a grid file, cached per (file, modification time) in a process.

    A process fitting many stars (a ``teffmc batch`` worker) reads a grid file once, and
    again only when the file was replaced.
    """
    return Grid.read(path)


def _read_current(path):
    try:
        mtime = os.stat(path).st_mtime_ns
    except OSError:
        mtime = None  # Grid.read says what is wrong
    return _read(path, mtime)


def grid_cache_info():
    """Hits and misses of the per-process grid cache (:func:`functools.lru_cache` info)."""
    return _read.cache_info()


def load_grid(path=None):
    """Load a photosphere grid.

    Parameters
    ----------
    path : str or path-like, optional
        ``None`` or ``"builtin"`` for the built-in grid (approximate, computed by
        teffmc's own LTE synthesis), ``"blackbody"`` for Planck surface fluxes, or the
        path of a grid file written by ``teffmc grid build`` / ``teffmc grid import``.
    """
    if path is None or str(path) == "builtin":
        p = builtin_grid_path()
        if not p.exists():
            raise GridError(f"the built-in grid file {p} is missing; run `teffmc grid build`")
        return _read_current(str(p))
    if str(path) == "blackbody":
        return BlackbodyGrid()
    p = Path(path)
    if not p.exists():
        raise GridError(f"grid file {p} does not exist")
    return _read_current(str(p.resolve()))
