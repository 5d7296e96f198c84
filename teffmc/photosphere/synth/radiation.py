"""Radiative transfer: Planck function, moments J and H, the emergent flux.

Scattering is treated as absorption, so the source function is S = B_lambda(T).
Interior moments come from a short-characteristics formal solution with a source
function linear in tau between depth points (exact for linear S) and a Gauss-Legendre
angle quadrature; the emergent flux uses the exponential-integral form
F = 2 pi int S E2 dtau (Mihalas 1978, "Stellar Atmospheres", 2nd ed., eq. 2-62, from
memory), again exact for piecewise-linear S, with the diffusion approximation below the
deepest point.
"""

import numpy as np
from scipy.special import expn

from .constants import HC_K, C, H

__all__ = ["MU", "WMU", "emergent_flux", "moments", "planck"]

# 4-point Gauss-Legendre quadrature on [0, 1] (Abramowitz & Stegun 1964, Table 25.4,
# from memory; recomputed here by numpy)
_x, _w = np.polynomial.legendre.leggauss(4)
MU = 0.5 * (_x + 1.0)
WMU = 0.5 * _w


def planck(wave, T):
    """B_lambda [erg s^-1 cm^-2 A^-1 sr^-1] for wave [A] (n_wave,) and T (n_depth,)."""
    w = np.asarray(wave, float)[None, :]
    T = np.asarray(T, float)[:, None]
    wc = w * 1e-8
    return 2.0 * H * C**2 / wc**5 / np.expm1(HC_K / (w * T)) * 1e-8


def _weights(d):
    """Integration weights of a linear source over an interval of optical depth d.

    Returns (e, a, b) with e = exp(-d); the interval contributes a*S_near + b*S_far
    where S_near is at the end the ray arrives at.
    """
    e = np.exp(-d)
    small = d < 1e-4
    ds = np.where(small, 1.0, d)
    g = np.where(small, 1.0 - d / 2.0 + d * d / 6.0, -np.expm1(-d) / ds)   # (1-e)/d
    return e, 1.0 - g, g - e


def moments(tau, S):
    """Mean intensity J and Eddington flux H, shapes (n_depth, n_wave).

    tau : optical depth (n_depth, n_wave), increasing with depth, tau[0] > 0.
    """
    nd = tau.shape[0]
    J = np.zeros_like(S)
    Hf = np.zeros_like(S)
    dt = np.diff(tau, axis=0)
    for mu, wmu in zip(MU, WMU):
        e, a, b = _weights(dt / mu)
        # incoming ray: I(top) = S(0)(1 - exp(-tau0/mu)) (constant S above the grid)
        im = np.empty_like(S)
        im[0] = S[0] * -np.expm1(-tau[0] / mu)
        for i in range(nd - 1):
            im[i + 1] = im[i] * e[i] + a[i] * S[i + 1] + b[i] * S[i]
        ip = np.empty_like(S)
        dsdt = (S[-1] - S[-2]) / np.maximum(dt[-1], 1e-300)
        ip[-1] = S[-1] + mu * dsdt                          # diffusion approximation
        for i in range(nd - 2, -1, -1):
            ip[i] = ip[i + 1] * e[i] + a[i] * S[i] + b[i] * S[i + 1]
        J += 0.5 * wmu * (ip + im)
        Hf += 0.5 * wmu * mu * (ip - im)
    return J, Hf


def emergent_flux(tau, S):
    """Surface flux F_lambda = 2 pi int_0^inf S E2 dtau, shape (n_wave,).

    S is constant above tau[0], linear between points, and continues with its last slope
    below the deepest point (diffusion approximation).
    """
    e3 = expn(3, tau)
    e4 = expn(4, tau)
    flux = S[0] * (0.5 - e3[0])                             # E3(0) = 1/2
    dt = np.diff(tau, axis=0)
    slope = np.diff(S, axis=0) / np.maximum(dt, 1e-300)
    # int_a^b [S_a + s (t - a)] E2 dt = S_a (E3a - E3b) + s (E4a - E4b - (b - a) E3b)
    flux = flux + np.sum(S[:-1] * (e3[:-1] - e3[1:])
                         + slope * (e4[:-1] - e4[1:] - dt * e3[1:]), axis=0)
    flux = flux + S[-1] * e3[-1] + slope[-1] * e4[-1]
    return 2.0 * np.pi * flux
