"""``teffmc grid import``: a folder of model spectra plus a parameter table -> a Grid.

The table (ECSV, or CSV / plain text as read by :mod:`teffmc.observe`) has one row
per model with columns ``file`` (path relative to the folder), ``teff`` [K],
``logg`` [cgs dex] and ``mh`` [dex] (names are case-insensitive). Optional columns
``wave_unit``, ``flux_unit`` and ``air`` (true/false, or ``medium``: air/vacuum)
state per model what its file does not say.

Spectra are read with the observation readers (:func:`teffmc.observe._readers.read_raw`:
FITS 1-D images with a spectral WCS, FITS binary tables, ECSV, CSV/text); model
spectra need no error column. Units and medium: what the file says wins; the
per-row column, then the ``wave_unit`` / ``flux_unit`` / ``air`` arguments, fill in
when the file says nothing; a per-row value that contradicts the file is an error.
Wavelengths go to vacuum Angstrom (air -> vacuum with the observe package's formula,
Morton 2000, ApJS 130, 403, eq. 8), fluxes to F_lambda erg s^-1 cm^-2 A^-1 with
astropy's ``spectral_density`` equivalency (F_nu, Jy, per-micron ... all accepted).

Common wavelength axis, in this order:

1. ``wave`` if given (vacuum Angstrom, ascending, inside every spectrum);
2. else, if every spectrum has the same vacuum axis (same length, all wavelengths
   within a relative 1e-9, i.e. 0.3 m/s: unit and air->vacuum round-off only), that
   axis is kept exactly, from the first model that needed no wavelength conversion,
   and no flux is resampled (a grid written out and imported back is identical);
3. else the overlap of all spectra, [max of first wavelengths, min of last], sampled
   uniformly in ln(lambda) with the finest step among the models (per model the
   median step in ln(lambda) inside the overlap; the step is shrunk slightly so that
   the overlap's two ends are pixels).

Resampling (cases 1 and 3) is flux-conserving: each output pixel gets the mean,
over its extent (edges midway between neighbouring output pixels, clipped to the
model's range), of the model taken as piecewise linear between its own pixels. On
an output axis finer than the model this is close to linear interpolation; on a
coarser one it is a bin average, so no flux is lost between samples.

Parameter axes are the unique table values; combinations without a model are holes
(NaN), listed in ``grid.holes`` and on one line in ``grid.provenance["holes"]``.
"""

from pathlib import Path

import numpy as np

from ..errors import DataError, GridError
from ..observe import _readers
from ..observe._text import read_text_table, to_float
from ..observe._units import flux_to_flam, parse_unit, wave_to_A
from ..observe.airvac import air_to_vacuum
from .grid import AXES, Grid
from .resample import log_uniform_overlap, rebin_flux_conserving

__all__ = ["import_grid", "log_uniform_overlap", "read_param_table", "rebin_flux_conserving"]

# Two axes closer than this relative difference are the same axis (unit and
# air->vacuum round-off is ~1e-14; 1e-9 is 0.3 m/s; common practice, no source).
_SAME_AXIS_RTOL = 1e-9
_TRUE = {"true", "t", "yes", "y", "1", "air", "awav"}
_FALSE = {"false", "f", "no", "n", "0", "vacuum", "vac", "wave"}
_MISSING = {"", "--", "none", "nan", "null"}


# ---------------------------------------------------------------------- the table
def read_param_table(path):
    """Read the parameter table: ``{column (lower case): ndarray of str}`` and labels."""
    path = Path(path)
    if not path.is_file():
        raise GridError(f"{path}: parameter table not found")
    try:
        if path.suffix.lower() == ".ecsv":
            from astropy.table import Table

            t = Table.read(path, format="ascii.ecsv")
            cols = {}
            for name in t.colnames:
                col = t[name]
                mask = np.ma.getmaskarray(col) if hasattr(col, "mask") else np.zeros(len(col), bool)
                cols[name] = np.array(["" if m else str(v) for v, m in zip(np.asarray(col), mask)])
            names = list(t.colnames)
        else:
            names, _, cols, _ = read_text_table(path)
    except DataError:
        raise
    except (OSError, ValueError) as exc:
        raise GridError(f"{path}: cannot read the parameter table ({exc})") from None
    lower = {}
    for n in names:
        if n.strip().lower() in lower:
            raise GridError(f"{path}: column {n!r} appears twice")
        lower[n.strip().lower()] = np.asarray(cols[n], dtype=str)
    for need in ("file", *AXES):
        if need not in lower:
            raise GridError(f"{path}: no column {need!r} (columns are {names}); "
                            f"the table needs file, teff, logg, mh")
    if lower["file"].size == 0:
        raise GridError(f"{path}: the parameter table has no rows")
    return lower


def _row_value(cols, key, row):
    if key not in cols:
        return None
    v = str(cols[key][row]).strip()
    return None if v.lower() in _MISSING else v


def _row_air(cols, row, table):
    for key in ("air", "medium"):
        v = _row_value(cols, key, row)
        if v is None:
            continue
        if v.lower() in _TRUE:
            return True
        if v.lower() in _FALSE:
            return False
        raise GridError(f"{table}: row {row + 1}, column {key!r}: should be true/false or "
                        f"air/vacuum but got {v!r}")
    return None


# ---------------------------------------------------------------------- one spectrum
def _read_raw_model(path):
    """``read_raw`` for a model spectrum, which usually has no error column.

    read_raw requires an error column/extension; for a table without one the flux
    column is passed as a stand-in error (ignored here); for a FITS image the
    spectral WCS is decoded with the readers' own ``_wcs_wavelengths``.
    """
    try:
        return _readers.read_raw(path)
    except DataError as exc:
        if exc.column != "err":
            raise
    name = str(path).lower()
    if name.endswith(_readers._FITS_SUFFIXES):
        from astropy.io import fits

        with fits.open(path, memmap=False) as hdul:
            for hdu in hdul:
                if hdu.data is None or getattr(hdu.data, "size", 0) == 0:
                    continue
                if isinstance(hdu, fits.BinTableHDU):
                    names = list(hdu.columns.names)
                    break
                h = hdu.header
                flux = np.asarray(hdu.data, dtype=float)
                if flux.ndim != 1:
                    raise DataError(f"image should be 1-D but has shape {flux.shape}", file=path)
                ctype = str(h.get("CTYPE1", "")).strip().upper()
                return {"wave": _readers._wcs_wavelengths(h, flux.size, path), "flux": flux,
                        "wave_unit": h.get("CUNIT1"), "flux_unit": h.get("BUNIT"),
                        "medium": {"AWAV": "air", "WAVE": "vacuum"}.get(ctype.split("-")[0]),
                        "names": {"wave": "CTYPE1", "flux": hdu.name or "image"}}
            else:
                raise DataError("no image or table HDU with data", file=path)
    elif name.endswith(".ecsv"):
        from astropy.table import Table

        names = Table.read(path, format="ascii.ecsv").colnames
    else:
        names = read_text_table(path)[0]
    # Any existing column stands in for "err" to learn which column is the flux.
    flux_col = _readers._pick_columns(names, {"err": names[0]}, path)["flux"]
    return _readers.read_raw(path, {"err": flux_col})


def _unit(file_unit, row_unit, arg_unit, role, path):
    """Pick the unit: the file's; else the row's; else the argument's. Returns (unit, how)."""
    if file_unit is not None and str(file_unit).strip() != "":
        unit = parse_unit(file_unit, file=path, column=role)
        if row_unit is not None and parse_unit(row_unit, file=path, column=role) != unit:
            raise GridError(f"{path}: the table says {role}_unit={row_unit!r} but the file "
                            f"says {file_unit!r}")
        return unit
    for given in (row_unit, arg_unit):
        if given is not None:
            return parse_unit(given, file=path, column=role)
    raise GridError(f"{path}: no {role} unit in the file; give {role}_unit (argument or "
                    f"a {role}_unit table column)")


def _read_model(path, row_units, row_air, air, wave_unit, flux_unit):
    """Read one model: vacuum Angstrom, F_lambda cgs, and a description of conversions."""
    raw = _read_raw_model(path)
    names = raw["names"]
    w_unit = _unit(raw["wave_unit"], row_units[0], wave_unit, "wave", path)
    f_unit = _unit(raw["flux_unit"], row_units[1], flux_unit, "flux", path)
    medium = raw["medium"]
    if medium is not None and row_air is not None and row_air != (medium == "air"):
        raise GridError(f"{path}: the table says air={row_air} but the file says its "
                        f"wavelengths are in {medium}")
    in_air = (medium == "air") if medium is not None else (row_air if row_air is not None
                                                           else bool(air))
    wave = wave_to_A(raw["wave"], w_unit, file=path, column=names["wave"])
    flux = np.asarray(raw["flux"], dtype=float)
    if wave.ndim != 1 or wave.size < 2 or wave.size != flux.size:
        raise GridError(f"{path}: needs >= 2 wavelengths and as many fluxes, got "
                        f"{wave.size} and {flux.size}")
    if in_air:
        wave = air_to_vacuum(wave)
    bad = np.flatnonzero(~np.isfinite(wave))
    if bad.size:
        raise GridError(f"{path}: column {names['wave']}: pixel {bad[0] + 1} wavelength is "
                        f"{wave[bad[0]]}")
    if wave.size > 1 and np.all(np.diff(wave) < 0):
        wave, flux = wave[::-1], flux[::-1]
    step = np.flatnonzero(np.diff(wave) <= 0)
    if step.size:
        i = step[0]
        raise GridError(f"{path}: column {names['wave']}: wavelengths should increase strictly "
                        f"but {wave[i + 1]:.6g} A follows {wave[i]:.6g} A")
    flam = flux_to_flam(flux, f_unit, wave, file=path, column=names["flux"])
    bad = np.flatnonzero(~(np.isfinite(flam) & (flam > 0)))
    if bad.size:
        i = bad[0]
        raise GridError(f"{path}: column {names['flux']}: flux should be finite and > 0 but got "
                        f"{flux[i]:g} at {wave[i]:.6g} A ({bad.size} such pixels)")
    how = {"wave": str(w_unit), "flux": str(f_unit), "air": bool(in_air),
           "native": bool(w_unit == parse_unit("Angstrom") and not in_air)}
    return wave, flam, how


# ---------------------------------------------------------------------- wavelengths
def _same_axis(a, b):
    return a.size == b.size and bool(np.all(np.abs(a - b) <= _SAME_AXIS_RTOL * np.abs(b)))


# ---------------------------------------------------------------------- the grid
def _summary(values):
    counts = {}
    for v in values:
        counts[v] = counts.get(v, 0) + 1
    return ", ".join(f"{k} ({n} files)" for k, n in counts.items())


def _resolve_table(folder, table):
    table = Path(table)
    if not table.is_file() and not table.is_absolute() and (folder / table).is_file():
        return folder / table
    return table


def import_grid(folder, table, *, air=False, wave_unit=None, flux_unit=None, wave=None,
                name=None):
    """Build a :class:`~teffmc.photosphere.grid.Grid` from a folder of model spectra.

    Parameters
    ----------
    folder : str or path-like
        Folder holding the model spectra; ``file`` entries are relative to it.
    table : str or path-like
        ECSV or CSV table with columns ``file, teff, logg, mh`` (optional
        ``wave_unit, flux_unit, air``/``medium``). Looked up in ``folder`` if it is
        relative and not found as given.
    air : bool
        Wavelengths are in air, for files (and rows) that do not say.
    wave_unit, flux_unit : str or astropy.units.Unit, optional
        Units for files (and rows) that do not say; any length / flux density.
    wave : array_like, optional
        Output axis [vacuum Angstrom]; by default see the module docstring.
    name : str, optional
        Grid name; default the folder's name.

    Returns
    -------
    Grid
        With ``provenance`` keys ``source_folder, table, n_models, holes, wave_axis,
        wave_units, flux_units, air_to_vacuum``.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise GridError(f"{folder}: model folder not found")
    table = _resolve_table(folder, table)
    cols, params = _read_params(table)
    waves, fluxes, hows = _read_models(folder, table, cols, air, wave_unit, flux_unit)
    out, axis_note, shared = _output_axis(wave, waves, hows, folder, cols)
    axes = {ax: np.unique(params[ax]) for ax in AXES}
    log_flux = np.full((*tuple(a.size for a in axes.values()), out.size), np.nan, np.float32)
    for r in range(cols["file"].size):
        idx = tuple(int(np.searchsorted(axes[ax], params[ax][r])) for ax in AXES)
        if shared:
            log_flux[idx] = fluxes[r]
        else:
            f = rebin_flux_conserving(waves[r], 10.0 ** fluxes[r].astype(float), out)
            log_flux[idx] = np.log10(f)
    n = cols["file"].size
    prov = {
        "importer": "teffmc grid import (teffmc.photosphere.importer)",
        "source_folder": str(folder.resolve()),
        "table": str(table.resolve()),
        "n_models": str(n),
        "wave_axis": axis_note,
        "wave_units": _summary(h["wave"] + ("" if h["wave"] == "Angstrom" else " -> Angstrom")
                               for h in hows),
        "flux_units": _summary(h["flux"] + " -> erg s-1 cm-2 Angstrom-1" for h in hows),
        "air_to_vacuum": (f"{sum(h['air'] for h in hows)} of {n} files converted "
                          f"(Morton 2000, ApJS 130, 403, eq. 8)"),
    }
    grid = Grid(axes["teff"], axes["logg"], axes["mh"], out, log_flux, provenance=prov,
                name=name or folder.resolve().name)
    holes = grid.holes
    listing = "; ".join(f"teff={t:g} logg={g:g} mh={m:g}" for t, g, m in holes)
    prov["holes"] = f"{len(holes)}: {listing}" if holes else "0"
    return Grid(grid.teff, grid.logg, grid.mh, grid.wave, grid.log_flux, provenance=prov,
                name=grid.name)


def _read_params(table):
    """Return the parameter table's columns and its finite, distinct (teff, logg, mh) rows."""
    cols = read_param_table(table)
    params = {ax: to_float(cols[ax], file=table, column=ax) for ax in AXES}
    for ax in AXES:
        bad = np.flatnonzero(~np.isfinite(params[ax]))
        if bad.size:
            raise GridError(f"{table}: row {bad[0] + 1}, column {ax!r}: should be a finite number "
                            f"but got {cols[ax][bad[0]]!r}")
    seen = {}
    for r in range(cols["file"].size):
        key = tuple(float(params[ax][r]) for ax in AXES)
        if key in seen:
            raise GridError(f"{table}: rows {seen[key] + 1} and {r + 1} both have teff={key[0]:g} "
                            f"logg={key[1]:g} mh={key[2]:g} ({cols['file'][seen[key]]}, "
                            f"{cols['file'][r]})")
        seen[key] = r
    return cols, params


def _read_models(folder, table, cols, air, wave_unit, flux_unit):
    """Every row's model: vacuum Angstrom axes, log10 F_lambda (float32), how it was read."""
    waves, fluxes, hows = [], [], []
    for r in range(cols["file"].size):
        fname = _row_value(cols, "file", r)
        if fname is None:
            raise GridError(f"{table}: row {r + 1}, column 'file' is empty")
        path = folder / fname
        if not path.is_file():
            raise GridError(f"{table}: row {r + 1}: model file {path} not found")
        units = (_row_value(cols, "wave_unit", r), _row_value(cols, "flux_unit", r))
        w, f, how = _read_model(path, units, _row_air(cols, r, table), air, wave_unit, flux_unit)
        if waves and _same_axis(w, waves[-1]) and not how["native"]:
            w = waves[-1]  # share one array per distinct axis (memory)
        waves.append(w)
        fluxes.append(np.log10(f).astype(np.float32))  # what the grid stores
        hows.append(how)
    return waves, fluxes, hows


def _output_axis(wave, waves, hows, folder, cols):
    """Choose the grid's wavelength axis (see the module docstring).

    Returns the axis, a note on it, and whether it is every model's own axis (no
    resampling).
    """
    if wave is not None:
        out = np.asarray(wave, dtype=float)
        if out.ndim != 1 or out.size < 1 or not np.all(np.isfinite(out)) or \
                np.any(np.diff(out) <= 0):
            raise GridError("wave should be a finite, strictly increasing 1-D array")
        for r, w in enumerate(waves):
            if out[0] < w[0] or out[-1] > w[-1]:
                raise GridError(f"{folder / cols['file'][r]}: covers {w[0]:.6g}-{w[-1]:.6g} A "
                                f"but wave= needs {out[0]:.6g}-{out[-1]:.6g} A")
        return out, f"given: {out.size} pixels, resampled flux-conservingly", False
    ref = next((k for k, h in enumerate(hows) if h["native"]), 0)
    if all(_same_axis(w, waves[ref]) for w in waves):
        out = waves[ref].copy()
        return out, f"shared by all models, kept exactly ({out.size} pixels)", True
    out = log_uniform_overlap(waves)
    return out, (f"overlap {out[0]:.6g}-{out[-1]:.6g} A, log-uniform, {out.size} pixels "
                 f"(finest model step), resampled flux-conservingly"), False
