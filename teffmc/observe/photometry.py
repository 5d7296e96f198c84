"""Observed photometry: the container and the table reader.

A photometry table (ECSV, CSV or whitespace text) has one row per
measurement and the columns

``band``    speclite name (``bessell-V``) or a user filter ECSV file
            (a relative path is taken relative to the table)
``mag``     magnitude, or ``flux`` with a unit (F_lambda, F_nu, Jy, ...)
``err``     1-sigma error, in mag or in the flux unit
``system``  ``vega`` or ``ab``
``floor``   optional systematic floor [mag], added in quadrature

Fluxes are turned into magnitudes on reading: a flux is the photon-weighted
band mean <F_lambda> (or <F_nu>, converted with the pivot wavelength, which is
exact for these means); AB: m = -2.5 log10 <F_nu> - 48.60; Vega:
m = -2.5 log10(<F_lambda> / <F_lambda,Vega>) + 0.03. Flux errors become
magnitude errors to first order, 2.5/ln(10) * err/flux.
"""

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from teffmc.errors import DataError
from teffmc.observe._text import read_text_table, to_float
from teffmc.observe._units import flux_to_flam, parse_unit
from teffmc.observe.bandset import (
    AB_FNU0,
    C_A_PER_S,
    VEGA_MAG,
    BandSet,
    _band_weights,
    _vega_band_flux,
)
from teffmc.observe.filters import get_filter, vega_spectrum

__all__ = ["Photometry", "make_photometry", "read_photometry"]

_MAG_PER_LN = 2.5 / np.log(10.0)


def _readonly(values, dtype=float):
    arr = np.array(values, dtype=dtype)
    arr.flags.writeable = False
    return arr


@dataclass(frozen=True)
class Photometry:
    """Validated magnitudes.

    Attributes
    ----------
    bands : tuple of str
        Filter names or user filter files.
    mag : ndarray
        Magnitudes [mag].
    err : ndarray
        1-sigma errors [mag], > 0.
    system : tuple of str
        ``"vega"`` or ``"ab"`` per band.
    floor : ndarray
        Systematic floors [mag], >= 0.
    source : str or None
        The file read.
    """

    bands: tuple
    mag: np.ndarray
    err: np.ndarray
    system: tuple
    floor: np.ndarray
    source: str | None = None

    def __len__(self):
        """Return the number of measurements."""
        return len(self.bands)

    @property
    def total_err(self):
        """sqrt(err^2 + floor^2) [mag]."""
        return np.hypot(self.err, self.floor)

    def bandset(self, wave_model, *, vega_mag=VEGA_MAG):
        """Build a :class:`~teffmc.observe.bandset.BandSet` for these bands on a model grid."""
        return BandSet(self.bands, self.system, wave_model, vega_mag=vega_mag)


def make_photometry(bands, mag, err, system, floor=None, *, source=None):
    """Validate and build :class:`Photometry` (errors name file, column and value)."""
    bands = tuple(str(b) for b in np.atleast_1d(bands))
    n = len(bands)
    if n == 0:
        raise DataError("has no rows (no band to fit)", file=source, column="band", value=0)
    system = (system,) * n if isinstance(system, str) else tuple(system)
    floor = np.zeros(n) if floor is None else floor
    cols = {"mag": mag, "err": err, "system": system, "floor": floor}
    for name, values in cols.items():
        if len(np.atleast_1d(values)) != n:
            raise DataError(
                f"has {len(np.atleast_1d(values))} values but there are {n} bands",
                file=source,
                column=name,
                value=len(np.atleast_1d(values)),
            )
    for band in bands:
        get_filter(band, file=source)
    seen = {}
    for i, band in enumerate(bands):  # a band twice would be fitted twice (or disagree)
        if band in seen:
            j = seen[band]
            raise DataError(
                f"row {i + 1}: band {band} is also in row {j + 1} (values {mag[j]!r} and "
                f"{mag[i]!r}); give each band once (combine repeated measurements first)",
                file=source, column="band", value=band)
        seen[band] = i
    system = tuple(str(s).strip().lower() for s in system)
    for s in system:
        if s not in ("vega", "ab"):
            raise DataError(
                f"should be 'vega' or 'ab' but got {s!r}", file=source, column="system", value=s
            )
    mag, err, floor = (np.asarray(v, dtype=float).reshape(n) for v in (mag, err, floor))
    for name, values, ok in (
        ("mag", mag, np.isfinite(mag)),
        ("err", err, np.isfinite(err) & (err > 0)),
        ("floor", floor, np.isfinite(floor) & (floor >= 0)),
    ):
        if not ok.all():
            i = int(np.flatnonzero(~ok)[0])
            need = {"mag": "finite", "err": "finite and > 0", "floor": "finite and >= 0"}[name]
            raise DataError(
                f"row {i + 1} ({bands[i]}): should be {need} but got {values[i]:g}",
                file=source,
                column=name,
                value=values[i],
            )
    return Photometry(
        bands,
        _readonly(mag),
        _readonly(err),
        system,
        _readonly(floor),
        None if source is None else str(source),
    )


def _flux_to_mag(flux, err, unit, band, system, path, row):
    """One flux measurement (photon-weighted band mean) -> (mag, mag error)."""
    filt = get_filter(band, file=path)
    pivot = filt.pivot_wavelength
    flam = flux_to_flam(flux, unit, pivot, file=path, column="flux")
    eflam = flux_to_flam(err, unit, pivot, file=path, column="err")
    if not flam > 0:
        raise DataError(
            f"row {row} ({band}): flux should be > 0 but got {flux:g}",
            file=path,
            column="flux",
            value=flux,
        )
    if system == "ab":
        mag = -2.5 * np.log10(flam * pivot**2 / C_A_PER_S / AB_FNU0)
    else:
        wave, _ = vega_spectrum()
        vega_mean = _vega_band_flux(filt) / _band_weights(filt, wave).sum()
        mag = -2.5 * np.log10(flam / vega_mean) + VEGA_MAG
    return mag, _MAG_PER_LN * eflam / flam


def _read_columns(path):
    """{name: values}, {name: unit} from an ECSV or text table."""
    if str(path).lower().endswith(".ecsv"):
        from ._readers import read_ecsv_table

        table = read_ecsv_table(path)
        values = {}
        for name in table.colnames:
            col = table[name]
            if col.dtype.kind in "US":
                values[name] = np.ma.filled(np.ma.asarray(col), "").astype(str)
            else:
                values[name] = np.ma.filled(np.ma.asarray(col, dtype=float), np.nan)
        return values, {n: table[n].unit for n in table.colnames if table[n].unit is not None}
    names, units, cols, meta = read_text_table(path)
    if "flux" in names and "flux" not in units and "flux_unit" in meta:
        units["flux"] = meta["flux_unit"]
    numeric = {"mag", "flux", "err", "floor"}
    values = {n: to_float(c, file=path, column=n) if n in numeric else c for n, c in cols.items()}
    return values, units


def _check_columns(values, path):
    """Check that the columns band, err, system and exactly one of mag and flux are there."""
    for need in ("band", "err", "system"):
        if need not in values:
            raise DataError(
                f"missing column {need!r} (columns are {list(values)})", file=path, column=need
            )
    if ("mag" in values) == ("flux" in values):
        raise DataError(
            "give exactly one of the columns 'mag' and 'flux'",
            file=path,
            column="mag" if "mag" in values else "flux",
        )


def _band_names(column, path):
    """Return the band names; a relative ``.ecsv`` filter file is taken from the table's folder.

    Every band is looked up once here, so an unknown one is refused with the file.
    """
    folder = Path(path).parent
    bands = [
        b if not (b.lower().endswith(".ecsv") and not Path(b).is_absolute()) else str(folder / b)
        for b in (str(x).strip() for x in column)
    ]
    for band in bands:
        get_filter(band, file=path)
    return bands


def _systems(column, path):
    """Magnitude systems, 'vega' or 'ab' (any case)."""
    system = [str(s).strip().lower() for s in column]
    for i, s in enumerate(system):
        if s not in ("vega", "ab"):
            raise DataError(
                f"row {i + 1}: should be 'vega' or 'ab' but got {s!r}",
                file=path,
                column="system",
                value=s,
            )
    return system


def _fluxes_to_mags(flux, err, units, bands, system, path):
    """(mag, mag error) arrays from a flux column with a unit and its errors."""
    if "flux" not in units:
        raise DataError(
            "flux column has no unit (use 'flux [mJy]' or '# flux_unit: mJy')",
            file=path,
            column="flux",
        )
    unit = parse_unit(units["flux"], file=path, column="flux")
    pairs = []
    for i, (f, e, b, s) in enumerate(zip(flux, err, bands, system)):
        if not (np.isfinite(e) and e > 0):
            raise DataError(
                f"row {i + 1} ({b}): should be finite and > 0 but got {e:g}",
                file=path,
                column="err",
                value=e,
            )
        pairs.append(_flux_to_mag(f, e, unit, b, s, path, i + 1))
    mag, err = (np.array(v, dtype=float) for v in zip(*pairs))
    return mag, err


def read_photometry(path):
    """Read a photometry table (see the module notes for the columns).

    Parameters
    ----------
    path : str or path-like
        ``.ecsv`` (flux unit from the column), ``.csv`` or text (flux unit as
        ``flux [mJy]`` in the header or a ``# flux_unit: mJy`` comment).

    Returns
    -------
    Photometry
    """
    try:
        values, units = _read_columns(path)
    except FileNotFoundError:
        raise DataError("file not found", file=path) from None
    except OSError as exc:  # a folder, no permission, ...
        raise DataError(f"cannot read file ({exc.strerror or exc})", file=path) from None
    _check_columns(values, path)
    bands = _band_names(values["band"], path)
    system = _systems(values["system"], path)
    err = np.asarray(values["err"], dtype=float)
    if "mag" in values:
        unit = units.get("mag")
        if unit is not None and str(unit) not in ("mag", ""):
            raise DataError(
                f"mag column unit should be mag but got {unit}",
                file=path,
                column="mag",
                value=str(unit),
            )
        mag = values["mag"]
    else:
        mag, err = _fluxes_to_mags(values["flux"], err, units, bands, system, path)
    return make_photometry(bands, mag, err, system, values.get("floor"), source=path)
