"""Continuous and (smeared) molecular / atomic line opacity on a wavelength grid.

``Opacity(wave)`` precomputes everything that depends on wavelength only; calling
``continuum(...)`` and ``lines(...)`` with a depth structure returns opacities per gram
of shape (n_depth, n_wave). Scattering (Rayleigh, Thomson) is treated as true absorption
(approximation: S = B everywhere).
"""

import numpy as np

from .bands import band_basis, band_weights
from .constants import HC_K, KB, SIGMA_T

__all__ = ["Opacity"]

# Gray 2005, eq. 8.11 (fit by Wishart 1979 as quoted by Gray; coefficients from memory):
# H- bound-free cross-section alpha = sum a_i lambda^i [1e-18 cm^2], lambda in Angstrom,
# valid 2250-15000 A; clipped at 0 and set to 0 beyond the 16421 A photo-detachment edge.
_HM_BF = (1.99654, -1.18267e-5, 2.64243e-6, -4.40524e-10, 3.23992e-14, -1.39568e-18,
          2.78701e-23)
# Gray 2005, eq. 8.13 (Bell & Berrington 1987 fit as quoted by Gray; from memory):
# H- free-free per neutral H atom per unit P_e, valid 2600-113900 A.
_HM_FF_F0 = (-2.2763, -1.6850, 0.76661, -0.053346)
_HM_FF_F1 = (15.2827, -9.2846, 1.99381, -0.142631)
_HM_FF_F2 = (-197.789, 190.266, -67.9775, 10.6913, -0.625151)
# Gray 2005, eq. 8.4-8.8: hydrogenic bound-free/free-free, alpha0 = 1.0449e-26 cm^2 per
# A^3 (from memory), Gaunt factors set to 1, Lyman edge 911.27 A, I = 13.598 eV.
_ALPHA0 = 1.0449e-26
_I_H = 13.598
# Rayleigh scattering cross-sections [cm^2], lambda in A:
# H: Gray 2005 eq. 8.15 after Dalgarno (from memory); H2: Dalgarno & Williams 1962,
# ApJ 136, 690 (from memory). Both held at their 1300 A values further into the UV.
_RAY_H = (5.799e-13, 1.422e-6, 2.784)
_RAY_H2 = (8.14e-13, 1.28e-6, 1.61)


class Opacity:
    """Wavelength-dependent parts of the opacity for a fixed wavelength grid [A]."""

    def __init__(self, wave):
        w = np.asarray(wave, float)
        self.wave = w
        lw = np.log10(w)
        a = sum(c * w**i for i, c in enumerate(_HM_BF))
        a = np.where(w <= 2250.0, sum(c * 2250.0**i for i, c in enumerate(_HM_BF)), a)
        self.hm_bf = np.where(w < 16421.0, np.clip(a, 0.0, None), 0.0) * 1e-18
        lwc = np.log10(np.clip(w, 2600.0, 113900.0))
        self.ff = [sum(c * lwc**i for i, c in enumerate(cs))
                   for cs in (_HM_FF_F0, _HM_FF_F1, _HM_FF_F2)]
        # beyond the fit range, free-free scales as lambda^2 (classical limit)
        self.ff_scale = (w / np.clip(w, 2600.0, 113900.0)) ** 2
        lr = np.maximum(w, 1300.0)
        self.ray_h = _RAY_H[0] / lr**4 + _RAY_H[1] / lr**6 + _RAY_H[2] / lr**8
        self.ray_h2 = _RAY_H2[0] / lr**4 + _RAY_H2[1] / lr**6 + _RAY_H2[2] / lr**8
        self.nmin = np.ceil(np.sqrt(w / 911.27)).astype(int)   # lowest ionisable level
        self.lw = lw
        self.basis, self.names = band_basis(w)                  # (n_basis, n_wave)
        self.n_haze = sum(n.startswith("haze") for n in self.names)   # last rows

    def continuum(self, T, sp, rho):
        """Continuous opacity [cm^2 g^-1], shape (n_depth, n_wave)."""
        T = T[:, None]
        kT_inv = 1.0 / T
        w = self.wave[None, :]
        stim = -np.expm1(-HC_K / (w * T))
        theta = 5040.0 * kT_inv
        lt = np.log10(theta)
        n = {k: sp[k][:, None] / (KB * T) for k in ("H", "H-", "H2", "e")}
        pe = sp["e"][:, None]
        k_hm_bf = n["H-"] * self.hm_bf[None, :] * stim
        k_hm_ff = (n["H"] * 1e-26 * pe * self.ff_scale[None, :]
                   * 10.0 ** (self.ff[0][None, :] + self.ff[1][None, :] * lt
                              + self.ff[2][None, :] * lt**2))
        # hydrogen bound-free (3 explicit levels from the lowest ionisable one) + the
        # integral over higher levels + free-free (Gray 2005 eq. 8.8, from memory)
        tot = np.zeros((T.shape[0], w.shape[1]))
        for j in range(3):
            nn = self.nmin + j
            chi_n = _I_H * (1.0 - 1.0 / nn**2)
            tot += 10.0 ** (-theta * chi_n[None, :]) / nn[None, :] ** 3
        chi3 = _I_H * (1.0 - 1.0 / (self.nmin + 3) ** 2)
        fac = np.log10(np.e) / (2.0 * theta * _I_H)
        tot += fac * (10.0 ** (-theta * chi3[None, :]) - 10.0 ** (-theta * _I_H))
        tot += fac * 10.0 ** (-theta * _I_H)
        k_h = n["H"] * _ALPHA0 * w**3 * tot * stim
        k_ray = n["H"] * self.ray_h[None, :] + n["H2"] * self.ray_h2[None, :]
        k_e = n["e"] * SIGMA_T
        return (k_hm_bf + k_hm_ff + k_h + k_ray + k_e) / rho[:, None]

    def lines(self, T, sp, rho, mh):
        """Smeared molecular-band and atomic line-haze opacity [cm^2 g^-1].

        Returns (molecular bands, atomic haze), each (n_depth, n_wave).
        """
        wts = band_weights(T, sp, mh)                       # (n_depth, n_basis)
        stim = -np.expm1(-HC_K / (self.wave[None, :] * T[:, None])) / rho[:, None]
        nh = self.n_haze
        # einsum (no BLAS) keeps the summation order fixed whatever the thread count, so
        # the grid build is bit-reproducible
        mol = np.einsum("ij,jk->ik", wts[:, :-nh], self.basis[:-nh]) * stim
        haze = np.einsum("ij,jk->ik", wts[:, -nh:], self.basis[-nh:]) * stim
        return mol, haze
