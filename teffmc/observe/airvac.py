"""Air <-> vacuum wavelength conversion.

Uses the refractive index of standard air adopted by the IAU: the formula of
Morton 2000, ApJS 130, 403 (his eq. 8, from Birch & Downs 1994 via Edlen 1966):

    n - 1 = 8.34254e-5 + 2.406147e-2 / (130 - s^2) + 1.5998e-4 / (38.9 - s^2)

with s = 1e4 / lambda_vac [1/micron]; lambda_air = lambda_vac / n.
Following the usual convention (common practice, no source) vacuum wavelengths
below 2000 A are not converted; in air the cut is at the air image of 2000 A
(1999.352 A), so that round trips are exact on both sides of it.
"""

import numpy as np

__all__ = ["air_to_vacuum", "refractive_index_air", "vacuum_to_air"]

# Below this wavelength [A] both systems are vacuum (common practice, no source).
_AIR_MIN_A = 2000.0


def refractive_index_air(wave_vac_A):
    """Refractive index of standard air (Morton 2000, eq. 8).

    Parameters
    ----------
    wave_vac_A : array_like
        Vacuum wavelength [Angstrom].

    Returns
    -------
    ndarray
        n [dimensionless], same shape as the input.
    """
    s2 = (1.0e4 / np.asarray(wave_vac_A, dtype=float)) ** 2
    # Coefficients: Morton 2000, ApJS 130, 403, eq. 8.
    return 1.0 + 8.34254e-5 + 2.406147e-2 / (130.0 - s2) + 1.5998e-4 / (38.9 - s2)


def vacuum_to_air(wave_A):
    """Convert vacuum wavelengths to air wavelengths.

    Parameters
    ----------
    wave_A : array_like
        Vacuum wavelength [Angstrom]; values below 2000 A are returned unchanged.

    Returns
    -------
    ndarray
        Air wavelength [Angstrom].
    """
    w = np.asarray(wave_A, dtype=float)
    return np.where(w < _AIR_MIN_A, w, w / refractive_index_air(np.maximum(w, _AIR_MIN_A)))


def air_to_vacuum(wave_A):
    """Convert air wavelengths to vacuum wavelengths.

    Inverts :func:`vacuum_to_air` by fixed-point iteration
    ``lambda_vac = lambda_air * n(lambda_vac)``; it converges to machine
    precision in a few steps because dn/dlambda is tiny, so a round trip is
    exact to ~1e-10 A.

    Parameters
    ----------
    wave_A : array_like
        Air wavelength [Angstrom]; values below 1999.352 A are returned unchanged.

    Returns
    -------
    ndarray
        Vacuum wavelength [Angstrom].
    """
    w = np.asarray(wave_A, dtype=float)
    cut = _AIR_MIN_A / refractive_index_air(_AIR_MIN_A)
    wa = np.maximum(w, cut)
    vac = wa * refractive_index_air(wa)
    for _ in range(6):
        vac = wa * refractive_index_air(vac)
    return np.where(w < cut, w, vac)
