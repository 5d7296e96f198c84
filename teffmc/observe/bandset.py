"""Synthetic photometry: magnitudes of model spectra, a batch at once.

Conventions
-----------
Photon counting: the band flux of F_lambda is ``int F_lambda R lambda dlambda``
with R the photon-detection probability (speclite's convention). The energy
convention (``int F_lambda R dlambda``) differs by ~0.005 mag: for Vega in
Bessell V, V_AB = +0.006 photon-counting vs +0.002 energy (computed with
speclite; docs/references.md#sun-and-vega).

AB: m_AB = -2.5 log10 <f_nu> - 48.60 with f_nu in erg s^-1 cm^-2 Hz^-1
(Oke & Gunn 1983, ApJ 266, 713), i.e. a flat f_nu = 3630.78 Jy source has
m_AB = 0 in every band.

Vega: m = -2.5 log10(<F> / <F_Vega>) + VEGA_MAG with <F_Vega> from the shipped
CALSPEC alpha_lyr_stis_011 spectrum and Vega given VEGA_MAG = 0.03 in every
band: V(Vega) = 0.026 +- 0.008 (Bohlin & Gilliland 2004, AJ 127, 3508),
rounded to 0.03 as is usual, with all colours of Vega zero (common practice,
no source). Pass ``vega_mag`` to use other values.

Integration: flux and response are both taken as linear between their nodes;
on the union of model and filter nodes the integrand (a product of three
linear factors) is integrated exactly with Simpson's rule. The AB reference
is integrated on the same model grid, so a flat-f_nu model gives exactly 0.
"""

import numpy as np

from teffmc.constants import C_A_PER_S
from teffmc.errors import DataError
from teffmc.observe.filters import get_filter, vega_spectrum

__all__ = ["AB_FNU0", "C_A_PER_S", "VEGA_MAG", "BandSet", "synth_mag"]

VEGA_MAG = 0.03  # Bohlin & Gilliland 2004 V = 0.026 +- 0.008, rounded (common practice)
AB_FNU0 = 10.0 ** (-0.4 * 48.60)  # [erg s^-1 cm^-2 Hz^-1], Oke & Gunn 1983: 3630.78 Jy
_SYSTEMS = ("vega", "ab")


def _band_weights(filt, x):
    """Coefficients w (n_x,) with int F R lambda dlambda = w @ F(x), exactly for linear F, R."""
    lo, hi = filt.wave_range
    if x[0] > lo or x[-1] < hi:
        raise DataError(
            f"band {filt.name} needs {lo:.6g}-{hi:.6g} A but the wavelength grid covers "
            f"{x[0]:.6g}-{x[-1]:.6g} A",
            column="band",
            value=filt.name,
        )
    inside = (filt.wave >= lo) & (filt.wave <= hi)
    u = np.union1d(x[(x >= lo) & (x <= hi)], filt.wave[inside])
    r = np.interp(u, filt.wave, filt.response, left=0.0, right=0.0)
    h = np.diff(u)
    g = r * u
    g_mid = 0.5 * (r[:-1] + r[1:]) * 0.5 * (u[:-1] + u[1:])
    # Simpson on each interval; F at the mid-point is the mean of its ends.
    c = np.zeros(u.size)
    c[:-1] += h / 6.0 * (g[:-1] + 2.0 * g_mid)
    c[1:] += h / 6.0 * (g[1:] + 2.0 * g_mid)
    # F(u) is linear in F(x): spread each coefficient onto the two x nodes around u.
    idx = np.clip(np.searchsorted(x, u, "right") - 1, 0, x.size - 2)
    frac = (u - x[idx]) / (x[idx + 1] - x[idx])
    w = np.bincount(idx, c * (1.0 - frac), minlength=x.size)
    w += np.bincount(idx + 1, c * frac, minlength=x.size)
    return w


def _check_grid(wave):
    x = np.asarray(wave, dtype=float)
    if x.ndim != 1 or x.size < 2 or not (np.diff(x) > 0).all():
        raise DataError(
            "wavelength grid should be 1-D and strictly increasing", column="wave", value=x.shape
        )
    return x


class BandSet:
    """Precomputed synthetic photometry of several bands on one wavelength grid.

    For model fluxes ``F`` of shape (n, n_wave) on ``wave_model``,
    ``mags(F) = -2.5 log10(F @ W.T) + zp``: one matrix product per batch.

    Parameters
    ----------
    bands : sequence of str or Filter
        Band names (see :func:`teffmc.observe.filters.get_filter`).
    systems : str or sequence of str
        ``"vega"`` or ``"ab"`` per band (one string applies to all).
    wave_model : array_like, shape (n_wave,)
        Model wavelengths [Angstrom, vacuum]; must cover every band's
        :attr:`~teffmc.observe.filters.Filter.wave_range` (else DataError).
    vega_mag : float or dict, optional
        Vega's magnitude in the Vega system, per band name or for all
        (default :data:`VEGA_MAG` = 0.03).

    Attributes
    ----------
    W : ndarray, shape (n_band, n_wave)
        ``F @ W.T`` is the band flux relative to the zero-magnitude reference
        (10^(-0.4 (m - zp))) [dimensionless].
    zp : ndarray, shape (n_band,)
        Zero-point offsets [mag]: Vega's magnitude for Vega bands, 0 for AB.
    ref_flambda : ndarray, shape (n_band,)
        Photon-weighted mean F_lambda of a source with m = zp
        [erg s^-1 cm^-2 A^-1].
    pivot : ndarray, shape (n_band,)
        Pivot wavelengths [Angstrom].
    """

    def __init__(self, bands, systems, wave_model, *, vega_mag=VEGA_MAG):
        self.filters = tuple(get_filter(b) for b in bands)
        self.bands = tuple(f.name for f in self.filters)
        if isinstance(systems, str):
            systems = [systems] * len(self.filters)
        self.systems = tuple(str(s).lower() for s in systems)
        if len(self.systems) != len(self.filters):
            raise DataError(
                f"{len(self.systems)} systems for {len(self.filters)} bands",
                column="system",
                value=len(self.systems),
            )
        for s in self.systems:
            if s not in _SYSTEMS:
                raise DataError(
                    f"system should be 'vega' or 'ab' but got {s!r}", column="system", value=s
                )
        self.wave = _check_grid(wave_model)
        raw = np.array([_band_weights(f, self.wave) for f in self.filters]).reshape(
            -1, self.wave.size
        )
        norm = raw.sum(axis=1)  # int R lambda dlambda
        ref = np.empty(len(self.filters))
        zp = np.zeros(len(self.filters))
        ab_flambda = AB_FNU0 * C_A_PER_S / self.wave**2
        for i, (f, s) in enumerate(zip(self.filters, self.systems)):
            if s == "ab":
                ref[i] = raw[i] @ ab_flambda
            else:
                ref[i] = _vega_band_flux(f)
                zp[i] = vega_mag.get(f.name, VEGA_MAG) if isinstance(vega_mag, dict) else vega_mag
        self.W = raw / ref[:, None]
        self.zp = zp
        # F @ W.T touches only the columns some band uses; a contiguous W.T is ~2x faster.
        used = np.flatnonzero(self.W.any(axis=0))
        self._cols = slice(int(used[0]), int(used[-1]) + 1)
        self._WT = np.ascontiguousarray(self.W.T[self._cols])
        self.ref_flambda = ref / norm
        self._mean = raw / norm[:, None]
        self.pivot = np.array([f.pivot_wavelength for f in self.filters])

    def __len__(self):
        """Return the number of bands."""
        return len(self.filters)

    def ratio(self, flux):
        """Band flux relative to the zero-magnitude reference: F @ W.T, shape (..., n_band)."""
        return np.asarray(flux, dtype=float)[..., self._cols] @ self._WT

    def mags(self, flux):
        """Magnitudes, shape (..., n_band); NaN where the band flux is <= 0.

        Parameters
        ----------
        flux : array_like, shape (..., n_wave)
            F_lambda [erg s^-1 cm^-2 A^-1] on ``wave_model``.
        """
        r = self.ratio(flux)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(r > 0, -2.5 * np.log10(np.where(r > 0, r, 1.0)), np.nan) + self.zp

    def band_flux(self, flux):
        """Photon-weighted mean F_lambda in each band [erg s^-1 cm^-2 A^-1], (..., n_band).

        For fitting in flux space; compare with :meth:`mag_to_band_flux` of
        the observed magnitudes.
        """
        return np.asarray(flux, dtype=float) @ self._mean.T

    def mag_to_band_flux(self, mags):
        """Photon-weighted mean F_lambda [erg s^-1 cm^-2 A^-1] of given magnitudes (..., n_band)."""
        return self.ref_flambda * 10.0 ** (-0.4 * (np.asarray(mags, dtype=float) - self.zp))


_VEGA_CACHE = {}


def _vega_band_flux(filt):
    """Integrate F_Vega R lambda dlambda on the CALSPEC grid (cached per filter)."""
    key = (filt.name, filt.source, filt.wave.tobytes(), filt.response.tobytes())
    if key not in _VEGA_CACHE:
        wave, flux = vega_spectrum()
        _VEGA_CACHE[key] = float(_band_weights(filt, wave) @ flux)
    return _VEGA_CACHE[key]


def synth_mag(wave_A, flux_flambda, band, system="vega", *, vega_mag=VEGA_MAG):
    """Synthetic magnitude of one or many spectra in one band.

    Parameters
    ----------
    wave_A : array_like, shape (n_wave,)
        Vacuum wavelength [Angstrom], strictly increasing, covering the band.
    flux_flambda : array_like, shape (n_wave,) or (n, n_wave)
        F_lambda [erg s^-1 cm^-2 A^-1].
    band : str or Filter
        E.g. ``"bessell-V"``.
    system : {"vega", "ab"}
        Magnitude system (photon-counting; see the module notes).
    vega_mag : float
        Vega's magnitude in the Vega system (default 0.03).

    Returns
    -------
    float or ndarray of shape (n,)
    """
    flux = np.asarray(flux_flambda, dtype=float)
    mags = BandSet([band], [system], wave_A, vega_mag=vega_mag).mags(flux)[..., 0]
    return float(mags) if flux.ndim == 1 else mags
