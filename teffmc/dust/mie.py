"""Mie efficiencies of spheres through ``miepython``, single size or log-normal spread.

``miepython`` 3.x picks its backend once, at import, from the environment variable
``MIEPYTHON_USE_JIT`` (``"1"`` selects the numba kernels, anything else the pure
numpy ones; see ``miepython/_backend.py``). teffmc imports it lazily, on the first
Mie calculation, with the variable forced to ``"0"`` for that import and restored
afterwards, so there is never a JIT compile and ``import teffmc.dust`` stays fast.
If the caller imported miepython earlier with the JIT on, that choice stands (the
numbers are the same).
"""

import functools
import os
import sys

import numpy as np

from teffmc.dust._wave import as_wave_aa
from teffmc.dust.materials import get_material
from teffmc.errors import ConfigError

__all__ = ["cone_fraction", "efficiencies", "grain_optics", "lognormal_weights"]

#: Largest step in size parameter x when averaging over sizes: ~15 samples per period
#: pi/(n-1) of the interference structure for n <~ 2 (common practice, no source).
X_STEP = 0.2


def _miepython():
    """Import miepython with its pure-numpy backend (no numba JIT)."""
    if "miepython" not in sys.modules:
        old = os.environ.get("MIEPYTHON_USE_JIT")
        os.environ["MIEPYTHON_USE_JIT"] = "0"
        try:
            import miepython  # noqa: F401
        finally:
            if old is None:
                del os.environ["MIEPYTHON_USE_JIT"]
            else:
                os.environ["MIEPYTHON_USE_JIT"] = old
    return sys.modules["miepython"]


def efficiencies(m, x):
    """Extinction and scattering efficiencies and asymmetry of homogeneous spheres.

    Parameters
    ----------
    m : complex or array_like of complex
        Refractive index n - i k (k >= 0). A positive imaginary part is refused
        (``miepython`` would silently conjugate it).
    x : float or array_like
        Size parameter 2 pi a / lambda (> 0); broadcast against ``m``.

    Returns
    -------
    q_ext, q_sca, g : numpy.ndarray
        Efficiencies and asymmetry parameter <cos theta>, shape of the broadcast.

    Raises
    ------
    ConfigError
        Im(m) > 0 or x not > 0.

    Notes
    -----
    Mie theory as in Bohren & Huffman 1983, *Absorption and Scattering of Light by
    Small Particles*; series truncation of Wiscombe 1980 (both inside miepython).
    """
    m, x = np.broadcast_arrays(np.asarray(m, dtype=np.complex128), np.asarray(x, dtype=float))
    if np.any(m.imag > 0):
        bad = m[m.imag > 0].flat[0]
        raise ConfigError(
            f"refractive index should be n - ik with k >= 0 but got {bad}", key="m", value=bad
        )
    if np.any(~np.isfinite(x) | (x <= 0)):
        raise ConfigError(f"size parameter should be > 0 but got {x[~(x > 0)].flat[0]}", key="x")
    shape = x.shape
    mp = _miepython()
    q_ext, q_sca, _, g = mp.efficiencies_mx(m.ravel().copy(), x.ravel().copy())
    return (np.asarray(q_ext, float).reshape(shape), np.asarray(q_sca, float).reshape(shape),
            np.asarray(g, float).reshape(shape))


#: Gauss-Legendre nodes per angular segment of :func:`cone_fraction`.
N_THETA = 64


@functools.lru_cache(maxsize=64)
def _gauss_legendre(n):
    return np.polynomial.legendre.leggauss(n)


def cone_fraction(m, x, cone_deg):
    """Fraction of the scattered light that leaves within ``cone_deg`` of forward.

    Parameters
    ----------
    m : complex
        Refractive index n - i k (k >= 0).
    x : array_like
        Size parameters (> 0).
    cone_deg : float
        Half-angle of the forward cone [degree], in (0, 180].

    Returns
    -------
    numpy.ndarray
        P = 2 pi int_0^theta_c p(theta) sin(theta) dtheta with the unpolarised Mie
        phase function p normalised to 1 over the sphere (miepython ``norm='one'``).

    Notes
    -----
    The forward diffraction lobe of a large sphere has a width ~ 1/x rad, so the
    integral is split at min(theta_c, 10/x) and each part done by Gauss-Legendre
    quadrature in theta (``N_THETA`` nodes, more where the phase function's ~pi/x
    oscillations need them). Checked against the Rayleigh phase
    function and the Airy encircled energy (tests/test_dust_veil.py).
    """
    cone_deg = float(cone_deg)
    if not (np.isfinite(cone_deg) and 0.0 < cone_deg <= 180.0):
        raise ConfigError(f"cone half-angle should be in (0, 180] degrees but got {cone_deg}",
                          key="scatter_cone_deg", value=cone_deg)
    m = complex(m)
    if m.imag > 0:
        raise ConfigError(f"refractive index should be n - ik with k >= 0 but got {m}", key="m",
                          value=m)
    mp = _miepython()
    x = np.atleast_1d(np.asarray(x, dtype=float))
    tc = np.radians(cone_deg)
    out = np.empty(x.shape)
    for i, xi in enumerate(x.flat):
        edges = sorted({0.0, min(tc, 10.0 / xi), tc})
        total = 0.0
        for a, b in zip(edges[:-1], edges[1:]):
            # the phase function oscillates with period ~ pi / x in theta
            u, wq = _gauss_legendre(max(N_THETA, int(np.ceil(4.0 * xi * (b - a)))))
            t = a + 0.5 * (b - a) * (u + 1.0)
            p = mp.i_unpolarized(m, xi, np.cos(t), norm="one")
            total += 0.5 * (b - a) * np.sum(wq * 2.0 * np.pi * np.sin(t) * p)
        out.flat[i] = total
    return out


def lognormal_weights(ln_x, ln_x0, spread_dex, d_ln_x):
    """Cross-section weights pi a^2 n(a) d ln a of a log-normal size distribution.

    Parameters
    ----------
    ln_x : numpy.ndarray
        ln of the quadrature sizes (x or a; only ratios matter), shape (..., k).
    ln_x0 : float or numpy.ndarray
        ln of the central size, broadcastable to ``ln_x``.
    spread_dex : float
        Standard deviation of log10(a) [dex], > 0.
    d_ln_x : numpy.ndarray
        Quadrature widths in ln x, shape (k,).

    Returns
    -------
    numpy.ndarray
        Weights normalised to sum 1 along the last axis.

    Notes
    -----
    n(a) d ln a is Gaussian in ln a with sigma = spread_dex ln 10, centred on
    ln a0; the geometric cross-section pi a^2 weights every efficiency.
    """
    sig = spread_dex * np.log(10.0)
    u = ln_x - ln_x0
    w = np.exp(-0.5 * (u / sig) ** 2 + 2.0 * u) * d_ln_x
    return w / w.sum(axis=-1, keepdims=True)


def _check_spread(spread_dex):
    spread_dex = float(spread_dex)
    if not (np.isfinite(spread_dex) and 0.0 <= spread_dex <= 1.0):
        raise ConfigError(
            f"spread_dex should be in [0, 1] but got {spread_dex}", key="spread_dex",
            value=spread_dex,
        )
    return spread_dex


def _size_average(q_ext, q_sca, g, w):
    """Cross-section-weighted averages; g weighted by the scattering cross-section."""
    ext = np.sum(w * q_ext, axis=-1)
    sca = np.sum(w * q_sca, axis=-1)
    gs = np.sum(w * q_sca * g, axis=-1)
    return ext, sca, np.divide(gs, sca, out=np.zeros_like(gs), where=sca > 0)


def grain_optics(material, radius_um, wave, spread_dex=0.0):
    """Mie efficiencies of grains of one material on given wavelengths.

    Parameters
    ----------
    material : str or Material
        A name in :data:`teffmc.dust.materials.MATERIALS` or a Material.
    radius_um : float
        Grain radius [micron] (the median radius when ``spread_dex`` > 0).
    wave : array_like or astropy.units.Quantity
        Vacuum wavelengths [Angstrom].
    spread_dex : float
        Width of a log-normal size distribution [dex]; 0 for a single size.

    Returns
    -------
    q_ext, q_sca, g : numpy.ndarray
        Extinction and scattering efficiencies and asymmetry parameter on ``wave``.
        With a spread: <Q> = int Q pi a^2 n(a) da / int pi a^2 n(a) da, and g
        weighted by the scattering cross-section Q_sca pi a^2 n(a).

    Notes
    -----
    Direct evaluation at every wavelength (no table): the reference for
    :class:`teffmc.dust.MieTable`. The size quadrature spans +-5 sigma with steps
    of at most sigma/10 and at most ``X_STEP`` in x at the largest grain, which
    resolves the interference structure so that it averages out.
    """
    mat = get_material(material)
    wave = as_wave_aa(wave)
    radius_um = float(radius_um)
    if not (np.isfinite(radius_um) and radius_um > 0):
        raise ConfigError(f"grain radius should be > 0 but got {radius_um}", key="grain_radius")
    spread_dex = _check_spread(spread_dex)
    m = mat.refractive_index(wave)
    x0 = 2.0 * np.pi * radius_um * 1e4 / wave
    if spread_dex == 0.0:
        return efficiencies(m, x0)
    sig = spread_dex * np.log(10.0)
    x_max = x0.max() * np.exp(5.0 * sig)
    step = min(sig / 10.0, X_STEP / x_max)
    n_q = int(np.ceil(10.0 * sig / step)) + 1
    u = np.linspace(-5.0 * sig, 5.0 * sig, n_q)
    d_u = np.full(n_q, u[1] - u[0])
    d_u[[0, -1]] *= 0.5
    x = x0[:, None] * np.exp(u)[None, :]
    q_ext, q_sca, g = efficiencies(m[:, None], x)
    w = lognormal_weights(u[None, :], 0.0, spread_dex, d_u)
    return _size_average(q_ext, q_sca, g, w)
