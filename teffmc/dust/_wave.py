"""Wavelength input handling shared by the dust modules (vacuum Angstrom)."""

import numpy as np

from teffmc.errors import DataError

__all__ = ["as_wave_aa", "check_range"]


def as_wave_aa(wave):
    """Return ``wave`` as a 1-D float64 array in vacuum Angstrom.

    Parameters
    ----------
    wave : array_like or astropy.units.Quantity
        Wavelengths [Angstrom] as plain numbers, or a Quantity of length (any
        length unit). Scalars are promoted to length-1 arrays.

    Returns
    -------
    numpy.ndarray
        Wavelengths [Angstrom], float64, 1-D.

    Raises
    ------
    DataError
        If the values are not finite and positive, or a Quantity is not a length.
    """
    unit = getattr(wave, "unit", None)
    if unit is not None:
        import astropy.units as u

        if not unit.is_equivalent(u.AA):
            raise DataError(f"wavelengths should be a length but have unit {unit}")
        wave = wave.to_value(u.AA)
    arr = np.atleast_1d(np.asarray(wave, dtype=np.float64))
    if arr.ndim != 1:
        raise DataError(f"wavelengths should be a 1-D array but have shape {arr.shape}")
    if arr.size == 0:
        raise DataError("wavelengths should not be empty")
    bad = ~np.isfinite(arr) | (arr <= 0)
    if bad.any():
        raise DataError(f"wavelengths should be finite and > 0 but got {arr[bad][0]!r}")
    return arr


def check_range(wave, lo, hi, what):
    """Raise :class:`DataError` unless all ``wave`` lie in ``[lo, hi]`` [Angstrom]."""
    out = (wave < lo) | (wave > hi)
    if out.any():
        raise DataError(
            f"{what} is valid from {lo:.6g} to {hi:.6g} Angstrom, but the wavelengths reach "
            f"{wave.min():.6g}-{wave.max():.6g} Angstrom ({int(out.sum())} outside)"
        )
