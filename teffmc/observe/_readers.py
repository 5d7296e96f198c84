"""File readers for 1-D spectra. Each returns raw columns and units as found.

Bad-pixel masks: a flag column ``use``/``good`` (non-zero = use the pixel) and a mask
column or FITS extension ``mask``/``dq``/``quality``/``badpix`` (non-zero = bad pixel, the
astropy NDData convention and that of data-quality arrays; common practice, no source)
are combined into ``use``.

The returned dict has keys ``wave, flux, err, use`` (arrays or None),
``wave_unit, flux_unit, err_unit`` (str, Unit or None), ``medium``
("air", "vacuum" or None when the file does not say) and ``names``
(``{role: column label}`` for error messages).
"""

import numpy as np
from astropy.io import fits

from teffmc.errors import DataError
from teffmc.observe._text import read_text_table, to_float

__all__ = ["read_raw"]

# Column names recognised by default, per role (case-insensitive).
_DEFAULT_NAMES = {
    "wave": ("wavelength", "wave", "lambda", "lam", "wl"),
    "flux": ("flux", "flam", "f_lambda", "flambda", "fnu", "f_nu"),
    "err": (
        "err",
        "error",
        "flux_err",
        "flux_error",
        "sigma",
        "uncertainty",
        "unc",
        "e_flux",
        "staterror",
    ),
    "use": ("use", "good"),
    "mask": ("mask", "dq", "quality", "badpix", "bad"),
}
_OPTIONAL = ("use", "mask")
_MASK_HDUS = ("MASK", "DQ", "QUALITY", "BADPIX")
_ERR_HDUS = ("ERR", "ERROR", "SIGMA", "UNCERT", "UNCERTAINTY", "STDDEV")
_FITS_SUFFIXES = (".fits", ".fit", ".fts", ".fits.gz", ".fit.gz")


def _medium_from_text(value, path, column):
    text = str(value).strip().lower()
    if text in ("air", "awav"):
        return "air"
    if text in ("vacuum", "vac", "wave"):
        return "vacuum"
    raise DataError(
        f"medium should be 'air' or 'vacuum' but got {value!r}",
        file=path,
        column=column,
        value=value,
    )


def _pick_columns(names, columns, path):
    """Map roles to column names, from ``columns`` or the default names."""
    if columns is not None and not isinstance(columns, dict):
        columns = dict(zip(("wave", "flux", "err", "use", "mask"), columns))
    lower = {n.lower(): n for n in names}
    chosen = {}
    for role, defaults in _DEFAULT_NAMES.items():
        if columns is not None and role in columns:
            want = columns[role]
            if want not in names:
                raise DataError(
                    f"no column {want!r} (columns are {list(names)})",
                    file=path,
                    column=want,
                    value=want,
                )
            chosen[role] = want
        else:
            found = [lower[d] for d in defaults if d in lower]
            if found:
                chosen[role] = found[0]
            elif names[0] == "col1" and role not in _OPTIONAL:
                position = ("wave", "flux", "err").index(role)
                if position < len(names):
                    chosen[role] = names[position]
    for role in ("wave", "flux", "err"):
        if role not in chosen:
            raise DataError(
                f"no {role} column found among {list(names)}; "
                f"name it with columns={{'{role}': ...}}",
                file=path,
                column=role,
            )
    return chosen


def _wcs_wavelengths(header, n, path):
    """Pixel -> wavelength from CRVAL1/CDELT1(CD1_1)/CRPIX1, linear or log."""
    if "CRVAL1" not in header:
        raise DataError("1-D image without CRVAL1 (no spectral WCS)", file=path, column="CRVAL1")
    crval = float(header["CRVAL1"])
    cdelt = float(header.get("CDELT1", header.get("CD1_1", np.nan)))
    if not np.isfinite(cdelt) or cdelt == 0:
        raise DataError(
            f"CDELT1/CD1_1 should be non-zero but got {cdelt}",
            file=path,
            column="CDELT1",
            value=cdelt,
        )
    offset = np.arange(1, n + 1) - float(header.get("CRPIX1", 1.0))  # FITS pixels are 1-based
    ctype = str(header.get("CTYPE1", "")).strip().upper()
    if ctype.endswith("-LOG"):
        # Greisen et al. 2006, A&A 446, 747 (FITS paper III), eq. 5
        return crval * np.exp(cdelt * offset / crval)
    if int(header.get("DC-FLAG", 0)) == 1:
        # log10-linear dispersion (IRAF convention, from memory)
        return 10.0 ** (crval + cdelt * offset)
    return crval + cdelt * offset


def _mask_hdu(hdul, columns, n, path):
    """Bad-pixel array (True = bad) from a MASK/DQ/QUALITY/BADPIX extension, or None."""
    names = [h.name.upper() for h in hdul]
    want = (columns or {}).get("mask") if isinstance(columns, dict) else None
    if want is not None and want.upper() not in names:
        raise DataError(f"no extension {want!r} (extensions are {names})", file=path,
                        column=want, value=want)
    label = want.upper() if want is not None else next((m for m in _MASK_HDUS if m in names),
                                                       None)
    if label is None:
        return None
    data = np.asarray(hdul[names.index(label)].data)
    if data.shape != (n,):
        raise DataError(f"mask extension {label} has shape {data.shape} but the flux has "
                        f"{n} pixels", file=path, column=label, value=data.shape)
    return data != 0


def _read_fits_image(hdul, index, path, columns=None):
    hdu = hdul[index]
    header = hdu.header
    flux = np.asarray(hdu.data, dtype=float)
    if flux.ndim != 1:
        raise DataError(
            f"image HDU {index} should be 1-D but has shape {flux.shape}",
            file=path,
            column=f"HDU{index}",
            value=flux.shape,
        )
    ctype = str(header.get("CTYPE1", "")).strip().upper()
    medium = {"AWAV": "air", "WAVE": "vacuum"}.get(ctype.split("-")[0]) if ctype else None
    err, err_unit, err_label = None, None, None
    names = [h.name.upper() for h in hdul]
    for label in _ERR_HDUS + ("IVAR", "VAR", "VARIANCE"):
        if label in names:
            ehdu = hdul[names.index(label)]
            err = np.asarray(ehdu.data, dtype=float)
            if label == "IVAR":
                with np.errstate(divide="ignore", invalid="ignore"):
                    # ivar = 0 flags a bad pixel: infinite error, masked later
                    err = np.where(err >= 0, 1.0 / np.sqrt(err), -1.0)
            elif label in ("VAR", "VARIANCE"):
                err = np.where(err >= 0, np.sqrt(np.abs(err)), -1.0)
            err_unit = (
                ehdu.header.get("BUNIT") if label not in ("IVAR", "VAR", "VARIANCE") else None
            )
            err_label = label
            break
    if err is None:
        raise DataError(
            f"no error extension (one of {', '.join(_ERR_HDUS + ('IVAR', 'VAR'))})",
            file=path,
            column="err",
        )
    bad = _mask_hdu(hdul, columns, flux.size, path)
    return {
        "wave": _wcs_wavelengths(header, flux.size, path),
        "flux": flux,
        "err": err,
        "use": None if bad is None else ~bad,
        "wave_unit": header.get("CUNIT1"),
        "flux_unit": header.get("BUNIT"),
        "err_unit": err_unit,
        "medium": medium,
        "names": {"wave": "CTYPE1", "flux": hdu.name or f"HDU{index}", "err": err_label},
    }


def _read_fits_table(hdu, path, columns):
    names = list(hdu.columns.names)
    chosen = _pick_columns(names, columns, path)
    raw = {role: np.asarray(hdu.data[name]) for role, name in chosen.items()}
    units = {role: hdu.columns[name].unit for role, name in chosen.items()}
    medium = hdu.header.get("MEDIUM")
    return _assemble(raw, units, chosen, medium, path)


def _assemble(raw, units, chosen, medium, path):
    use = raw.get("use")
    use = None if use is None else np.asarray(use).astype(bool)
    if raw.get("mask") is not None:
        good = ~np.asarray(raw["mask"]).astype(bool)
        use = good if use is None else use & good
    return {
        "wave": np.asarray(raw["wave"], dtype=float),
        "flux": np.asarray(raw["flux"], dtype=float),
        "err": np.asarray(raw["err"], dtype=float),
        "use": use,
        "wave_unit": units.get("wave"),
        "flux_unit": units.get("flux"),
        "err_unit": units.get("err"),
        "medium": None if medium is None else _medium_from_text(medium, path, "medium"),
        "names": dict(chosen),
    }


def _read_fits(path, columns):
    """Read a FITS spectrum; a damaged file is a DataError.

    astropy.io.fits reads headers and data lazily, and on a damaged file (truncated data,
    unparsable cards, broken column definitions -- found by tests/test_fuzz.py) raises
    VerifyError, ValueError, TypeError, AttributeError, ... from wherever the data are
    first touched; all of them mean "not a readable FITS file".
    """
    import warnings

    from astropy.utils.exceptions import AstropyWarning

    try:
        # astropy logs its verification warnings on several lines of stderr; what
        # matters to the user is whether the file can be read (if not: one line here)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", AstropyWarning)
            return _read_fits_hdus(path, columns)
    except (DataError, OSError):
        raise
    except Exception as exc:  # noqa: BLE001 (see the docstring)
        msg = " ".join(str(exc).split())[:300]
        raise DataError(f"not a readable FITS file ({type(exc).__name__}: {msg})",
                        file=path) from None


def _read_fits_hdus(path, columns):
    # the file opened here, so that it is closed even when astropy fails inside open()
    with open(path, "rb") as fh, fits.open(fh, memmap=False) as hdul:
        for index, hdu in enumerate(hdul):
            if hdu.data is None or getattr(hdu.data, "size", 0) == 0:
                continue
            if isinstance(hdu, fits.BinTableHDU):
                return _read_fits_table(hdu, path, columns)
            if isinstance(hdu, (fits.PrimaryHDU, fits.ImageHDU)):
                return _read_fits_image(hdul, index, path, columns)
    raise DataError("no image or table HDU with data", file=path)


def read_ecsv_table(path):
    """Read an ECSV file as an astropy Table; any failure of the parser is a DataError.

    The parser is astropy's (YAML header, then rows): on a damaged file it raises many
    kinds of exception (InconsistentTableError, ValueError, YAML errors, KeyError,
    TypeError, UnicodeDecodeError, ... found by tests/test_fuzz.py), all of which mean
    "this file is not a valid ECSV table".
    """
    from astropy.table import Table

    try:
        return Table.read(path, format="ascii.ecsv")
    except FileNotFoundError:
        raise
    except Exception as exc:  # noqa: BLE001 (see the docstring)
        msg = " ".join(str(exc).split())[:300] or type(exc).__name__
        raise DataError(f"not a valid ECSV table ({msg})", file=path) from None


def _read_ecsv(path, columns):
    table = read_ecsv_table(path)
    chosen = _pick_columns(table.colnames, columns, path)
    raw, units = {}, {}
    for role, name in chosen.items():
        col = table[name]
        raw[role] = (
            np.ma.filled(np.ma.asarray(col, dtype=float), np.nan)
            if role not in _OPTIONAL
            else np.asarray(col)
        )
        units[role] = col.unit
    medium = table.meta.get("medium")
    return _assemble(raw, units, chosen, medium, path)


def _read_text(path, columns):
    names, units, cols, meta = read_text_table(path)
    chosen = _pick_columns(names, columns, path)
    raw = {}
    for role, name in chosen.items():
        values = to_float(cols[name], file=path, column=name)
        raw[role] = values != 0 if role in _OPTIONAL else values
    role_units = {role: units.get(name, meta.get(f"{role}_unit")) for role, name in chosen.items()}
    return _assemble(raw, role_units, chosen, meta.get("medium"), path)


def read_raw(path, columns=None):
    """Read a spectrum file into raw arrays, dispatching on the file name."""
    name = str(path).lower()
    try:
        if name.endswith(_FITS_SUFFIXES):
            return _read_fits(path, columns)
        if name.endswith(".ecsv"):
            return _read_ecsv(path, columns)
        return _read_text(path, columns)
    except FileNotFoundError:
        raise DataError("file not found", file=path) from None
    except OSError as exc:
        raise DataError(f"cannot read file: {exc}", file=path) from None
