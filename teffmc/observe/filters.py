"""Filter curves: speclite bands by name, or user curves from ECSV files.

Responses are photon-detection probabilities (photon-counting convention, as
speclite tabulates them): band fluxes use the integral of F_lambda R lambda.
"""

import difflib
import functools
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

import numpy as np

from teffmc.errors import DataError
from teffmc.observe._units import wave_to_A

__all__ = ["VEGA_FILE", "Filter", "get_filter", "known_bands", "vega_spectrum"]

VEGA_FILE = "alpha_lyr_stis_011.fits"  # CALSPEC; see teffmc/data/vega/PROVENANCE.txt


def _readonly(values):
    arr = np.array(values, dtype=float)
    arr.flags.writeable = False
    return arr


@dataclass(frozen=True)
class Filter:
    """A filter response curve.

    Attributes
    ----------
    name : str
        speclite name (``"bessell-V"``) or the file stem of a user curve.
    wave : ndarray
        Wavelength [Angstrom], strictly increasing.
    response : ndarray
        Photon-detection probability [dimensionless, >= 0], linear between nodes.
    source : str
        ``"speclite"`` or the path of the user file.
    """

    name: str
    wave: np.ndarray
    response: np.ndarray
    source: str

    @property
    def wave_range(self):
        """(lo, hi) [Angstrom]: where the response is non-zero, nodes included.

        A model grid must cover this whole range to give a magnitude.
        """
        nz = np.flatnonzero(self.response > 0)
        lo, hi = max(nz[0] - 1, 0), min(nz[-1] + 1, self.wave.size - 1)
        return float(self.wave[lo]), float(self.wave[hi])

    @property
    def pivot_wavelength(self):
        """Pivot wavelength [Angstrom]: sqrt(int R lambda / int R / lambda).

        Converts band-averaged F_lambda to F_nu (Tokunaga & Vacca 2005,
        PASP 117, 421; from memory): <f_nu> = <f_lambda> lambda_p^2 / c.
        """
        w, r = self.wave, self.response
        return float(np.sqrt(np.trapezoid(r * w, w) / np.trapezoid(r / w, w)))


@functools.cache
def known_bands():
    """Names of the filters shipped with speclite (``group-band``), sorted."""
    folder = resources.files("speclite") / "data" / "filters"
    return tuple(
        sorted(p.name[: -len(".ecsv")] for p in folder.iterdir() if p.name.endswith(".ecsv"))
    )


@functools.cache
def _speclite_filter(name):
    import speclite.filters

    curve = speclite.filters.load_filter(name)
    return Filter(name, _readonly(curve.wavelength), _readonly(curve.response), "speclite")


def _user_filter(path):
    from ._readers import read_ecsv_table

    try:
        table = read_ecsv_table(path)
    except FileNotFoundError:
        raise DataError("filter file not found", file=path) from None
    if len(table) < 2:
        raise DataError(f"filter curve has {len(table)} rows; it needs at least 2",
                        file=path, value=len(table))
    for col in ("wavelength", "response"):
        if col not in table.colnames:
            raise DataError(
                f"filter curve needs columns wavelength, response; has {table.colnames}",
                file=path,
                column=col,
            )
    unit = table["wavelength"].unit
    if unit is None:
        raise DataError("wavelength column has no unit", file=path, column="wavelength")
    wave = wave_to_A(table["wavelength"], unit, file=path, column="wavelength")
    resp = np.asarray(table["response"], dtype=float)
    if not (np.isfinite(wave).all() and (np.diff(wave) > 0).all()):
        raise DataError(
            "wavelengths should be finite and strictly increasing",
            file=path,
            column="wavelength",
            value=wave[np.argmin(np.diff(wave))],
        )
    bad = np.flatnonzero(~np.isfinite(resp) | (resp < 0))
    if bad.size or not (resp > 0).any():
        value = resp[bad[0]] if bad.size else 0.0
        raise DataError(
            f"response should be finite, >= 0 and somewhere > 0 but got {value}",
            file=path,
            column="response",
            value=value,
        )
    return Filter(Path(path).stem, _readonly(wave), _readonly(resp), str(path))


def get_filter(band, *, file=None, column="band"):
    """Look up a filter.

    Parameters
    ----------
    band : str or Filter
        A speclite name (``"bessell-V"``, ``"twomass-Ks"``, ``"gaiadr2-G"``,
        ...; see :func:`known_bands`), or the path of an ECSV file with
        columns ``wavelength`` (with a unit) and ``response`` (photon-counting).
    file, column : optional
        Where the name came from, for the error message.

    Returns
    -------
    Filter
    """
    if isinstance(band, Filter):
        return band
    text = str(band).strip()
    if text.lower().endswith(".ecsv"):
        return _user_filter(text)
    if text in known_bands():
        return _speclite_filter(text)
    close = difflib.get_close_matches(text, known_bands(), n=5, cutoff=0.5)
    hint = f"; close names: {', '.join(close)}" if close else ""
    raise DataError(f"unknown band {text!r}{hint}", file=file, column=column, value=text)


@functools.cache
def vega_spectrum():
    """Return the shipped CALSPEC Vega spectrum (alpha_lyr_stis_011).

    Returns
    -------
    wave : ndarray
        Vacuum wavelength [Angstrom] (CALSPEC uses vacuum wavelengths; from memory).
    flux : ndarray
        F_lambda [erg s^-1 cm^-2 A^-1].
    """
    from astropy.io import fits

    path = resources.files("teffmc") / "data" / "vega" / VEGA_FILE
    with resources.as_file(path) as real, fits.open(real, memmap=False) as hdul:
        data = hdul[1].data
        return _readonly(data["WAVELENGTH"]), _readonly(data["FLUX"])
