"""LTE plane-parallel model atmosphere and its emergent surface flux.

It computes T(tau), the hydrostatic structure and the temperature correction toward
radiative equilibrium.

Start: grey T(tau) = Teff [3/4 (tau + q(tau))]^(1/4) with the Hopf function q
(Mihalas 1978, "Stellar Atmospheres", 2nd ed., sec. 3-4; exact q(0) = 1/sqrt(3) and
q(inf) = 0.7104; the interpolating form q = 0.7104 - 0.1331 exp(-3.4488 tau) is a common
fit, from memory). Depth variable: Rosseland optical depth tau_R (log-uniform).
Hydrostatic equilibrium dP/dtau_R = g / kappa_R (gas pressure only: radiation pressure
and turbulence neglected) with kappa_R from a per-[M/H] table of the same opacity.
Temperature correction: the Unsoeld-Lucy scheme (Lucy 1964, in "First Harvard-Smithsonian
Conference on Stellar Atmospheres", SAO Special Report 167, p. 93; from memory):

    dB = (k_J/k_P) J - B + (k_J/k_P) [3 int_0^m k_H (H0 - H) dm + 2 (H0 - H(0))]

with Planck, absorption and flux means k_P, k_J, k_H per gram and column mass m.
Line opacity is represented by a three-step opacity distribution (picket fence) inside
each pixel: sub-channels with weights W_ODF see the smeared molecular opacity multiplied
by M_ODF and the atomic haze multiplied by H_ODF (sum W*M = sum W*H = 1, so the mean
opacity is the smeared one; the haze is spread more widely than the molecular bands, as
atomic lines leave gaps); the flux is the weighted mean of the channels. The multipliers
were chosen together with the haze amplitudes (solar colours) and checked against the
TiO band-depth and V-sensitivity acceptance tests. The weights are our choice (idea of opacity
distribution functions: e.g. Mihalas 1978 ch. 7 on line blanketing, from memory).

Known limitations (approximate by design): no convection, no radiation pressure (so the
hottest log g = -1 models are formally super-Eddington but are computed anyway), no
sphericity, no turbulence, constant atomic partition functions, scattering as absorption.
Near 3600 K, log g 0, V fades by ~0.21 mag for a 50 K cooling (about twice a blackbody),
less than the ~0.4 mag quoted for published red-supergiant grids
(docs/references.md#stellar-atmospheres-and-tio). Measured
cause (not Ti locked in TiO: TiO holds < 8 % of Ti anywhere in the 3650 K model, Ti is
mostly Ti+ below log tau_R = -3, and n(TiO) rises by x1.2-2.7 per 50 K): the smeared line
haze dominates the V-band opacity of cool models (~2.5 mag of V blanketing at 3650 K, TiO
~0.08 mag) and is nearly temperature-insensitive, while the outer layers where TiO exists
(T < 3000 K) cool by only 14-41 K in radiative equilibrium when Teff drops by 50 K. Removing
the haze, TiO f x10, wider or haze/TiO-uncorrelated opacity distributions, D0(TiO) +-0.07 eV
and tighter convergence all leave the V response at 0.16-0.235 mag.
"""

from dataclasses import dataclass, field
from functools import cache, lru_cache

import numpy as np

from ...errors import GridError
from .chemistry import equilibrium
from .constants import ABUND, AMU, KB, MASS, SIGMA
from .opacity import Opacity
from .radiation import emergent_flux, moments, planck

__all__ = [
    "H_ODF",
    "M_ODF",
    "W_ODF",
    "Atmosphere",
    "model_atmosphere",
    "wave_fine",
    "wave_full",
    "wave_work",
]

W_ODF = np.array([0.3, 0.4, 0.3])
M_ODF = np.array([0.3, 0.8, (1.0 - 0.3 * 0.3 - 0.4 * 0.8) / 0.3])     # molecular bands
H_ODF = np.array([0.2, 0.6, (1.0 - 0.3 * 0.2 - 0.4 * 0.6) / 0.3])     # atomic haze
LOGTAU = np.linspace(-6.0, 1.5, 51)
R_FINE = 2000.0


def _logwave(lo, hi, r):
    n = int(np.floor(np.log(hi / lo) * r)) + 1
    return lo * np.exp(np.arange(n) / r)


@cache
def wave_fine():
    """Return the grid's wavelength axis: vacuum A, 3000-50000 A, log-uniform, R_pix = 2000."""
    return _logwave(3000.0, 50000.0, R_FINE)


@cache
def _ext():
    blue = _logwave(1000.0, 3000.0, 100.0)[:-1]
    red = _logwave(50000.0, 2.0e6, 50.0)[1:]
    return blue, red


@cache
def wave_full():
    """Fine axis extended coarsely to 0.1-200 um (for bolometric integrals)."""
    b, r = _ext()
    return np.concatenate([b, wave_fine(), r])


@cache
def wave_work():
    """Coarser axis used while iterating the temperature structure."""
    b, r = _ext()
    return np.concatenate([b, wave_fine()[::4], r])


@lru_cache(maxsize=8)
def _opacity(key):
    return Opacity({"work": wave_work, "full": wave_full}[key]())


def _mu_h(mh):
    """Mass per hydrogen nucleus [g]."""
    return AMU * sum(ABUND[e] * MASS[e] * (1.0 if e in ("H", "He") else 10.0 ** mh)
                     for e in ABUND)


def _state(T, P, mh, u0=None):
    sp, u = equilibrium(T, P, mh, u0=u0)
    rho = sp["HN"] / (KB * T) * _mu_h(mh)
    return sp, u, rho


def _channels(op, T, sp, rho, mh):
    kc = op.continuum(T, sp, rho)
    kmol, khaze = op.lines(T, sp, rho, mh)
    return [kc + m * kmol + h * khaze for m, h in zip(M_ODF, H_ODF)]


def _trapz(y, x):
    return np.sum(0.5 * (y[..., 1:] + y[..., :-1]) * np.diff(x), axis=-1)


def _rosseland(op, T, kappas):
    """Rosseland mean over wavelengths and ODF channels (n_depth,)."""
    w = op.wave
    x = 1.43877688e8 / (w[None, :] * T[:, None])
    # dB/dT ∝ x^2 e^x / (e^x - 1)^2 / lambda^4 = x^2 / (4 sinh^2(x/2)) / lambda^4, with
    # x = hc/(lambda k T) (1.43877688e8 A K from CODATA 2018 h, c, k)
    dbdt = x**2 / (4.0 * np.sinh(np.minimum(x, 700) / 2.0) ** 2) / (w[None, :] * 1e-4) ** 4
    inv = sum(wk / k for wk, k in zip(W_ODF, kappas))
    return _trapz(dbdt, w) / _trapz(inv * dbdt, w)


_LT = np.arange(3.0, 4.5001, 0.02)
_LP = np.arange(-5.0, 10.0001, 0.25)


def rosseland_table(mh):
    """Tabulate log10 kappa_R [cm^2/g] on (_LT, _LP) for metallicity ``mh``.

    On the work wavelength grid, for the opacity scales in force (``bands.PHYSICS``, part
    of the cache key).
    """
    from .bands import PHYSICS

    return _rosseland_table(mh, PHYSICS["tio"], PHYSICS["haze"])


@lru_cache(maxsize=8)
def _rosseland_table(mh, _tio, _haze):
    op = _opacity("work")
    tt, pp = np.meshgrid(10**_LT, 10**_LP, indexing="ij")
    out = np.empty(tt.shape)
    for i in range(len(_LT)):
        T, P = tt[i], pp[i]
        sp, _, rho = _state(T, P, mh)
        out[i] = np.log10(_rosseland(op, T, _channels(op, T, sp, rho, mh)))
    return out


def _interp2(tab, lt, lp):
    fi = np.clip((lt - _LT[0]) / 0.02, 0, len(_LT) - 1.000001)
    fj = np.clip((lp - _LP[0]) / 0.25, 0, len(_LP) - 1.000001)
    i, j = int(fi), int(fj)
    a, b = fi - i, fj - j
    return ((1 - a) * (1 - b) * tab[i, j] + a * (1 - b) * tab[i + 1, j]
            + (1 - a) * b * tab[i, j + 1] + a * b * tab[i + 1, j + 1])


def hydrostatic(logtau, T, g, tab):
    """Gas pressure on the tau_R grid: d ln P / d ln tau = g tau / (P kappa_R)."""
    lt = np.log10(T)
    tau0 = 10.0 ** logtau[0]
    lp = 0.0
    for _ in range(50):                     # top: P = g tau / kappa(T, P)
        new = np.log10(g * tau0) - _interp2(tab, lt[0], lp)
        if abs(new - lp) < 1e-6:
            break
        lp = 0.5 * (lp + new)

    def f(x, ltx, lpx):                     # d log10 P / d log10 tau
        return g * 10.0 ** x / 10.0 ** lpx / 10.0 ** _interp2(tab, ltx, lpx)

    out = [lp]
    for k in range(len(logtau) - 1):
        x0, h = logtau[k], logtau[k + 1] - logtau[k]
        tm = 0.5 * (lt[k] + lt[k + 1])
        k1 = f(x0, lt[k], lp)
        k2 = f(x0 + h / 2, tm, lp + h / 2 * k1)
        k3 = f(x0 + h / 2, tm, lp + h / 2 * k2)
        k4 = f(x0 + h, lt[k + 1], lp + h * k3)
        lp = lp + h / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
        out.append(lp)
    return 10.0 ** np.array(out)


@dataclass
class Atmosphere:
    """A converged model: depth structure and diagnostics."""

    teff: float
    logg: float
    mh: float
    logtau: np.ndarray          # log10 Rosseland optical depth (nominal grid)
    T: np.ndarray               # temperature [K]
    P: np.ndarray               # gas pressure [dyn cm^-2]
    Pe: np.ndarray              # electron pressure [dyn cm^-2]
    rho: np.ndarray             # mass density [g cm^-3]
    m: np.ndarray               # column mass [g cm^-2]
    species: dict = field(repr=False)
    flux_error: float = np.nan  # max |H/H0 - 1| over depth after the last iteration
    iterations: int = 0
    history: list = field(default_factory=list, repr=False)   # flux error per iteration


def _solve_rt(op, T, sp, rho, m, mh):
    kappas = _channels(op, T, sp, rho, mh)
    B = planck(op.wave, T)
    out = []
    for k in kappas:
        dm = np.diff(m)[:, None]
        tau = np.concatenate([k[:1] * m[0], k[:1] * m[0] + np.cumsum(
            0.5 * (k[1:] + k[:-1]) * dm, axis=0)])
        out.append((k, tau))
    return B, out


def _ng(x, fallback):
    """Extrapolate from the last four iterates by Ng acceleration.

    Ng 1974, J. Chem. Phys. 61, 2680; formulation as in Olson, Auer & Buchler 1986,
    JQSRT 35, 431 (from memory).
    """
    d3, d2, d1 = x[3] - x[2], x[2] - x[1], x[1] - x[0]
    q1, q2 = d3 - d2, d3 - d1
    a = np.array([[q1 @ q1, q1 @ q2], [q1 @ q2, q2 @ q2]])
    b = np.array([q1 @ d3, q2 @ d3])
    try:
        c1, c2 = np.linalg.solve(a, b)
    except np.linalg.LinAlgError:
        return fallback
    new = (1.0 - c1 - c2) * x[3] + c1 * x[2] + c2 * x[1]
    if not np.all(np.isfinite(new)) or np.max(np.abs(new / x[3] - 1.0)) > 0.1:
        return fallback
    return new


def _iterate(op, T, g, mh, teff, tab, niter, u=None, tol=2e-3):
    h0 = SIGMA * teff**4 / (4.0 * np.pi)
    w = op.wave
    err = np.inf
    hist, errs, dtmax = [], [], np.inf
    for it in range(niter):
        P = hydrostatic(LOGTAU, T, g, tab)
        sp, u, rho = _state(T, P, mh, u)
        m = P / g
        B, ch = _solve_rt(op, T, sp, rho, m, mh)
        J = np.zeros_like(B)
        Hf = np.zeros_like(B)
        kJ = np.zeros(len(T))
        kP = np.zeros(len(T))
        kH = np.zeros(len(T))
        for wk, (k, tau) in zip(W_ODF, ch):
            Jk, Hk = moments(tau, B)
            J += wk * Jk
            Hf += wk * Hk
            kJ += wk * _trapz(k * Jk, w)
            kP += wk * _trapz(k * B, w)
            kH += wk * _trapz(k * Hk, w)
        Jb, Hb, Bb = _trapz(J, w), _trapz(Hf, w), _trapz(B, w)
        err = np.max(np.abs(Hb / h0 - 1.0))
        errs.append(err)
        if it > 0 and (err < tol or (err < 10 * tol and dtmax < 3e-4)):
            break
        kj, kp, kh = kJ / Jb, kP / Bb, kH / Hb
        dh = h0 - Hb
        integ = np.concatenate([[0.0], np.cumsum(0.5 * (kh[1:] * dh[1:] + kh[:-1] * dh[:-1])
                                                 * np.diff(m))])
        dB = (kj / kp) * Jb - Bb + (kj / kp) * (3.0 * integ + 2.0 * dh[0])
        dT = dB / (4.0 * Bb / T)
        dT = np.clip(dT, -0.06 * T, 0.06 * T)
        dtmax = np.max(np.abs(dT / T))
        T = T + dT
        hist.append(T.copy())
        if len(hist) >= 4 and (it + 1) % 4 == 0:
            T = _ng(hist[-4:], T)
    P = hydrostatic(LOGTAU, T, g, tab)           # structure consistent with the final T
    sp, u, rho = _state(T, P, mh, u)
    return T, P, sp, u, rho, P / g, errs, len(errs)


def model_atmosphere(teff, logg, mh, *, niter_work=40, niter_full=0, tol=1e-3, T_start=None):
    """Compute an LTE model atmosphere; returns :class:`Atmosphere`."""
    for name, v, lo, hi in (("teff", teff, 2000.0, 12000.0), ("logg", logg, -2.0, 6.0),
                            ("mh", mh, -3.0, 1.0)):
        if not (np.isfinite(v) and lo <= v <= hi):
            raise GridError(f"{name} should be within [{lo:g}, {hi:g}] but got {v!r}")
    tau = 10.0**LOGTAU
    q = 0.7104 - 0.1331 * np.exp(-3.4488 * tau)
    T = teff * (0.75 * (tau + q)) ** 0.25
    if T_start is not None:                    # warm start (e.g. a neighbouring model)
        T = np.asarray(T_start, float).copy()
    g = 10.0**logg
    tab = rosseland_table(float(mh))
    T, P, sp, u, rho, m, e1, n1 = _iterate(_opacity("work"), T, g, mh, teff, tab,
                                            niter_work, tol=tol)
    e2, n2 = [], 0
    if niter_full > 0:
        T, P, sp, u, rho, m, e2, n2 = _iterate(_opacity("full"), T, g, mh, teff, tab,
                                                niter_full, u=u, tol=tol)
    return Atmosphere(teff, logg, mh, LOGTAU.copy(), T, P, sp["e"], rho, m, sp, (e1 + e2)[-1],
                      n1 + n2, e1 + e2)


def flux_of(atm, op):
    """Emergent surface flux of a model on the wavelength grid of ``op``."""
    B, ch = _solve_rt(op, atm.T, atm.species, atm.rho, atm.m, atm.mh)
    return sum(wk * emergent_flux(tau, B) for wk, (k, tau) in zip(W_ODF, ch))
