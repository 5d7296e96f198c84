"""The grid file: one HDF5 file (readable as netCDF-4), checksums verified on load.

It holds the axes, the float32 log flux, units, provenance, the nuisance axes and
SHA-256 checksums. The layout is described in :mod:`teffmc.photosphere.grid`.
"""

import hashlib

import numpy as np

from ..errors import GridError

__all__ = ["AXES", "FORMAT", "FORMAT_VERSION", "grid_checksum", "write_grid", "read_grid"]

AXES = ("teff", "logg", "mh")
FORMAT = "teffmc-grid"
FORMAT_VERSION = 1


def grid_checksum(teff, logg, mh, wave, log_flux):
    """SHA-256 hex digest of the axes and the float32 flux, in a fixed byte order."""
    h = hashlib.sha256()
    for a in (teff, logg, mh, wave):
        h.update(np.ascontiguousarray(a, dtype="<f8").tobytes())
    h.update(np.ascontiguousarray(log_flux, dtype="<f4").tobytes())
    return h.hexdigest()


def write_grid(grid, path):
    """Write ``grid`` (a :class:`~teffmc.photosphere.grid.Grid`) to ``path``.

    HDF5, with the flux as gzip-compressed float32.
    """
    import h5py

    lf = np.asarray(grid.log_flux, dtype="<f4")
    with h5py.File(path, "w") as f:
        f.attrs["format"] = FORMAT
        f.attrs["format_version"] = FORMAT_VERSION
        f.attrs["name"] = grid.name
        f.attrs["checksum"] = grid_checksum(grid.teff, grid.logg, grid.mh, grid.wave, lf)
        for ax, unit in zip((*AXES, "wave"), ("K", "dex", "dex", "Angstrom (vacuum)")):
            d = f.create_dataset(ax, data=np.asarray(getattr(grid, ax), "<f8"))
            d.attrs["units"] = unit
        d = f.create_dataset("log_flux", data=lf, compression="gzip", compression_opts=6,
                             shuffle=True, chunks=(1, 1, 1, lf.shape[-1]))
        d.attrs["units"] = "log10(erg s-1 cm-2 Angstrom-1), surface flux"
        g = f.create_group("provenance")
        for k, v in grid.provenance.items():
            g.attrs[k] = v
        if grid.nuisance:
            from .nuisance import nuisance_checksum

            n = f.create_group("nuisance")
            n.attrs["checksum"] = nuisance_checksum(grid.nuisance)
            n.attrs["order"] = ",".join(grid.nuisance_names)
            for a in grid.nuisance:
                ga = n.create_group(a.name)
                for k in ("step", "low", "high", "note"):
                    ga.attrs[k] = getattr(a, k)
                for k in ("minus", "plus"):
                    ga.create_dataset(k, data=np.asarray(getattr(a, k), "<f4"),
                                      compression="gzip", compression_opts=6, shuffle=True,
                                      chunks=(1, 1, 1, lf.shape[-1]))

def read_grid(path, cls):
    """Read a grid file written by :func:`write_grid`, verifying its checksum.

    ``cls(**arrays, provenance=..., name=..., nuisance=...)`` makes the grid.
    """
    import h5py

    try:
        with h5py.File(path, "r") as f:
            if f.attrs.get("format") != FORMAT:
                raise GridError(f"{path}: not a teffmc grid file (format attribute missing)")
            arrays = {k: f[k][...] for k in (*AXES, "wave", "log_flux")}
            prov = {k: str(v) for k, v in f["provenance"].attrs.items()}
            name, checksum = str(f.attrs["name"]), str(f.attrs["checksum"])
            axes, nuis_sum = _read_nuisance(f)
    except (OSError, KeyError) as exc:
        raise GridError(f"{path}: cannot read grid file ({exc})") from None
    grid = cls(**arrays, provenance=prov, name=name, nuisance=axes)
    if grid_checksum(*(arrays[k] for k in (*AXES, "wave", "log_flux"))) != checksum:
        raise GridError(f"{path}: checksum mismatch, the file is corrupt or was edited")
    if axes:
        from .nuisance import nuisance_checksum

        if nuisance_checksum(axes) != nuis_sum:
            raise GridError(f"{path}: nuisance checksum mismatch, the file is corrupt or "
                            "was edited")
    return grid


def _read_nuisance(f):
    """Return the nuisance axes stored in an open grid file, and their checksum."""
    from .nuisance import NuisanceAxis

    if "nuisance" not in f:
        return (), None
    n = f["nuisance"]
    axes = tuple(NuisanceAxis(name=k, step=float(g.attrs["step"]), minus=g["minus"][...],
                              plus=g["plus"][...], low=float(g.attrs["low"]),
                              high=float(g.attrs["high"]), note=str(g.attrs["note"]))
                 for k, g in ((k, n[k]) for k in str(n.attrs["order"]).split(",")))
    return axes, str(n.attrs["checksum"])
