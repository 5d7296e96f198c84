"""Unit parsing and conversion to the core units (vacuum A, F_lambda cgs)."""

import warnings

import astropy.units as u
import numpy as np

from teffmc.errors import DataError

__all__ = ["FLAM", "flux_to_flam", "parse_unit", "wave_to_A"]

FLAM = u.erg / u.s / u.cm**2 / u.AA

# Unit spellings found in common files that astropy does not read as meant.
_ALIASES = {
    "angstroms": "Angstrom",
    "angstrom": "Angstrom",
    "a": "Angstrom",  # "A" in a wavelength column; astropy would read ampere
    "flam": "erg / (s cm2 Angstrom)",
    "fnu": "erg / (s cm2 Hz)",
    "erg/s/cm2/a": "erg / (s cm2 Angstrom)",
    "erg/cm2/s/a": "erg / (s cm2 Angstrom)",
    "erg/s/cm^2/a": "erg / (s cm2 Angstrom)",
    "erg/cm^2/s/a": "erg / (s cm2 Angstrom)",
}

# Physical types accepted as a flux density (per wavelength or per frequency).
_FLUX_TYPES = {
    "spectral flux density",
    "spectral flux density wav",
    "photon flux density",
    "photon flux density wav",
}


def parse_unit(text, *, file=None, column=None):
    """Parse a unit string (or pass a Unit through); DataError if unreadable."""
    if isinstance(text, u.UnitBase):
        return text
    key = str(text).strip()
    key = _ALIASES.get(key.lower().replace(" ", ""), key)
    try:
        with warnings.catch_warnings():
            # "erg/s/cm2/AA" is the usual spelling; astropy warns that the FITS
            # standard discourages several slashes, but reads it correctly.
            warnings.filterwarnings("ignore", message=".*multiple slashes", category=u.UnitsWarning)
            return u.Unit(key)
    except ValueError:
        raise DataError(
            f"cannot read unit {text!r}", file=file, column=column, value=text
        ) from None


def wave_to_A(values, unit, *, file=None, column=None):
    """Convert wavelengths to Angstrom; the unit must be a length."""
    unit = parse_unit(unit, file=file, column=column)
    if "length" not in set(unit.physical_type):
        raise DataError(
            f"wavelength unit should be a length but got {unit} ({unit.physical_type})",
            file=file,
            column=column,
            value=str(unit),
        )
    factor = unit.to(u.AA)
    # nm -> A comes out as 9.999999999999998; snap factors that are meant to be
    # exact powers of ten so that 502 nm reads as 5020 A exactly.
    snapped = 10.0 ** np.round(np.log10(factor))
    if abs(factor / snapped - 1.0) < 1e-12:
        factor = snapped
    return np.asarray(values, dtype=float) * factor


def flux_to_flam(values, unit, wave_A, *, file=None, column=None):
    """Convert a flux density (F_lambda, F_nu, photon flux) to erg/s/cm^2/A.

    Parameters
    ----------
    values : array_like
        Flux densities in ``unit``.
    unit : str or astropy.units.Unit
        Their unit; must be a spectral flux density.
    wave_A : array_like
        Vacuum wavelengths [Angstrom] at which to convert.
    """
    unit = parse_unit(unit, file=file, column=column)
    if not _FLUX_TYPES & set(unit.physical_type):
        raise DataError(
            f"unit should be a flux density (per wavelength or per frequency) but got "
            f"{unit} ({unit.physical_type})",
            file=file,
            column=column,
            value=str(unit),
        )
    equiv = u.spectral_density(np.asarray(wave_A, dtype=float) * u.AA)
    return (np.asarray(values, dtype=float) * unit).to_value(FLAM, equivalencies=equiv)
