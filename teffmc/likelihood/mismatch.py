r"""Model-mismatch terms for spectra: residuals of an imperfect grid are correlated.

A grid never reproduces a real star pixel by pixel: lines it lacks, band strengths and
continuum shape leave residuals that are correlated over tens to hundreds of pixels and
scale with the flux. With independent pixels a fit to thousands of pixels converges to a
sharp interval in the wrong place; a covariance for those residuals puts the grid's
imperfection into the interval.

Model (Notes)
-------------
For one spectrum with data d, model m (before calibration) and measurement variance
s^2 (jitter and interpolation error included), the residual in units of the model,
u = (d - m) / m, is

    u ~ N(0, C'),   C' = diag(s^2 / m^2) + a^2 K_rho + A Lambda A^T,

* ``"white"``: K_rho = I (an extra noise a x model flux per pixel);
* ``"correlated"``: K_rho the Matern-3/2 kernel in velocity v = c ln(lambda),
  k(dv) = (1 + sqrt(3)|dv|/rho) exp(-sqrt(3)|dv|/rho) (Rasmussen & Williams 2006,
  eq. 4.17, from memory), amplitude ``a`` (``mismatch_amp``, a fraction of the model
  flux) and length ``rho`` (``mismatch_scale`` [km/s]);
* A Lambda A^T the calibration polynomial, marginalised as in
  :mod:`teffmc.observe.calibration` (A the Legendre design, the same in relative units).

The flux-space density is the relative one times the Jacobian prod 1/|m_i|.

Matern-3/2 is the output of a two-state linear stochastic system (state f, f'), so
C' - A Lambda A^T is solved by a Kalman filter in O(n) per walker (Hartikainen & Sarkka
2010, "Kalman filtering and smoothing solutions to temporal Gaussian process regression
models", from memory): the innovations e_i / sqrt(S_i) whiten the residual and the
polynomial columns at once, sum log S_i is log det, and Woodbury's identity adds the
polynomial in K x K. The filter is exact (tested against dense Cholesky to 1e-8).

The leave-one-out terms are in :mod:`teffmc.likelihood.mismatch_loo`.
"""

import numba
import numpy as np

from ..constants import C_KMS

__all__ = ["C_KMS", "MISMATCH_KINDS", "velocity_axis", "correlated_loglike_parts",
           "matern32"]

MISMATCH_KINDS = ("none", "white", "correlated")
_LOG_2PI = np.log(2.0 * np.pi)
_SQRT3 = np.sqrt(3.0)


def velocity_axis(wave):
    """Return c ln(lambda) [km/s] of ascending wavelengths: the kernel's stationary axis."""
    return C_KMS * np.log(np.asarray(wave, float))


def matern32(dv, amp, rho):
    """Matern-3/2 covariance ``amp^2 (1 + sqrt3 |dv|/rho) exp(-sqrt3 |dv|/rho)``."""
    x = _SQRT3 * np.abs(dv) / rho
    return amp * amp * (1.0 + x) * np.exp(-x)


def _as_walkers(a, nw):
    return np.broadcast_to(np.asarray(a, float), (nw,)).copy()


# error_model="numpy": no zero-division checks, which keep loops from vectorising
@numba.njit(cache=True, fastmath=True, error_model="numpy")
def _gram(E, step, t, mT, d, e2, rp, jit2, rw, amp, rho, A):  # pragma: no cover
    """Accumulate the whitened Gram matrix of [u, A] under diag(D) + amp^2 K_rho per walker.

    The relative residual u = (d - m) / m and variance D are formed inside the loop.
    mT (n, nw) model flux, d (n,) data; the relative variance is
    D = jit2_w e2_i / m^2 + rp_i + rw_w (measurement, per-pixel and per-walker parts).
    E (n_steps, nw) holds exp(-lam dt) for the distinct pixel steps dt (``step[i]`` is
    the row of the step from pixel i-1 to i), computed outside by numpy's vectorised
    exp. Returns the Gram upper triangle (NG, nw) and log det of the flux-space
    covariance's non-polynomial part: sum log S_i + 2 sum log m_i, accumulated as logs
    of products of 8 pixels (each factor is S_i (m_i/m_0)^2, far from over/underflow).
    """
    n, nw = mT.shape
    J = A.shape[1] + 1
    G = np.zeros((J * (J + 1) // 2, nw))
    logdet = np.zeros(nw)
    lam = _SQRT3 / rho
    s2 = amp * amp
    q2 = s2 * lam * lam
    P00 = s2.copy()
    P01 = np.zeros(nw)
    P11 = q2.copy()
    X0 = np.zeros((J, nw))
    X1 = np.zeros((J, nw))
    E0 = np.empty((J, nw))
    f00 = np.empty(nw)
    f01 = np.empty(nw)
    f10 = np.empty(nw)
    f11 = np.empty(nw)
    k0 = np.empty(nw)
    k1 = np.empty(nw)
    rs = np.empty(nw)
    S = np.empty(nw)
    prod = np.ones(nw)
    ref = np.empty(nw)
    for w in range(nw):
        ref[w] = 1.0 / mT[0, w]
        logdet[w] = 2.0 * n * np.log(mT[0, w])
    for i in range(n):
        if i > 0:
            dt = t[i] - t[i - 1]
            row = step[i]
            for w in range(nw):
                ld = lam[w] * dt
                ex = E[row, w]
                f00[w] = ex * (1.0 + ld)
                f01[w] = ex * dt
                f10[w] = -ex * lam[w] * ld
                f11[w] = ex * (1.0 - ld)
            for w in range(nw):
                a00 = P00[w] - s2[w]
                a01 = P01[w]
                a11 = P11[w] - q2[w]
                b00 = f00[w] * a00 + f01[w] * a01
                b01 = f00[w] * a01 + f01[w] * a11
                b10 = f10[w] * a00 + f11[w] * a01
                b11 = f10[w] * a01 + f11[w] * a11
                P00[w] = b00 * f00[w] + b01 * f01[w] + s2[w]
                P01[w] = b00 * f10[w] + b01 * f11[w]
                P11[w] = b10 * f10[w] + b11 * f11[w] + q2[w]
            for j in range(J):
                for w in range(nw):
                    a = X0[j, w]
                    b = X1[j, w]
                    X0[j, w] = f00[w] * a + f01[w] * b
                    X1[j, w] = f10[w] * a + f11[w] * b
        di = d[i]
        e2i = e2[i]
        rpi = rp[i]
        mi = mT[i]
        for w in range(nw):          # gains and innovation variance: one vector loop
            im = 1.0 / mi[w]
            s = P00[w] + jit2[w] * e2i * im * im + rpi + rw[w]
            inv = 1.0 / s
            S[w] = s
            k0[w] = P00[w] * inv
            k1[w] = P01[w] * inv
            rs[w] = np.sqrt(inv)
            r = mi[w] * ref[w]
            prod[w] *= s * r * r
        if i % 8 == 7 or i == n - 1:
            for w in range(nw):
                logdet[w] += np.log(prod[w])
                prod[w] = 1.0
        x0 = X0[0]
        x1 = X1[0]
        e0 = E0[0]
        for w in range(nw):
            v = (di - mi[w]) / mi[w] - x0[w]
            x0[w] += k0[w] * v
            x1[w] += k1[w] * v
            e0[w] = v * rs[w]
        for j in range(1, J):
            aij = A[i, j - 1]
            x0 = X0[j]
            x1 = X1[j]
            e0 = E0[j]
            for w in range(nw):
                v = aij - x0[w]
                x0[w] += k0[w] * v
                x1[w] += k1[w] * v
                e0[w] = v * rs[w]
        g = 0
        for j in range(J):
            for m2 in range(j, J):
                gg = G[g]
                ej = E0[j]
                em = E0[m2]
                for w in range(nw):
                    gg[w] += ej[w] * em[w]
                g += 1
        for w in range(nw):
            s = S[w]
            P11[w] -= k1[w] * k1[w] * s
            P01[w] -= k0[w] * k1[w] * s
            P00[w] -= k0[w] * k0[w] * s
    return G, logdet


def _steps(t):
    """Distinct pixel steps of the kernel axis: (dt values, row of each pixel's step).

    Steps equal to 1e-12 of the largest are merged (a log-uniform pixel grid has one
    step up to rounding), so the transition's exp is taken once per distinct step.
    """
    dt = np.diff(t)
    if dt.size == 0:
        return np.zeros(1), np.zeros(t.size, np.int64)
    key = np.round(dt * (1e12 / max(float(np.max(np.abs(dt))), 1e-300))).astype(np.int64)
    _, first, inv = np.unique(key, return_index=True, return_inverse=True)
    return dt[first], np.concatenate([[0], inv]).astype(np.int64)


def _woodbury(G, logdet, n, k, prior_sigma):
    """-1/2 [chi2 + log det + n log 2 pi] with the polynomial added in K x K."""
    total = G[0] + logdet + n * _LOG_2PI
    if k:
        nw = G.shape[1]
        full = np.zeros((nw, k + 1, k + 1))
        for g, (i, j) in enumerate(zip(*np.triu_indices(k + 1))):
            full[:, i, j] = full[:, j, i] = G[g]
        lam = np.full(k, float(prior_sigma) ** 2)
        M = full[:, 1:, 1:] + np.diag(1.0 / lam)
        b = full[:, 0, 1:]
        L = np.linalg.cholesky(M)
        y = np.linalg.solve(L, b[..., None])[..., 0]
        logdet_m = 2.0 * np.sum(np.log(np.diagonal(L, axis1=-2, axis2=-1)), axis=-1)
        total = total - np.sum(y * y, axis=-1) + np.sum(np.log(lam)) + logdet_m
    return -0.5 * total


def correlated_loglike_parts(data, err2, model, t, amp, rho, jitter2, rel_pixel, rel_walker,
                             design=None, prior_sigma=0.2, steps=None):
    """Log-likelihood with a Matern-3/2 mismatch term (and the polynomial marginalised).

    The measurement variance is given by its parts, ``jitter2 * err2 + (rel_pixel +
    rel_walker) * model^2``: the relative residual and variance are formed inside the
    compiled filter (no (n_walkers, n_pix) temporaries). A plain variance per pixel is
    ``err2`` with ``jitter2 = 1`` and ``rel_pixel = rel_walker = 0``.

    Parameters
    ----------
    data : array_like, shape (n_pix,)
        Observed flux.
    err2 : array_like, shape (n_pix,)
        Measurement variance [flux^2] before the jitter.
    model : array_like, shape (n_walkers, n_pix)
        Model flux before calibration, > 0.
    t : array_like, shape (n_pix,)
        Ascending kernel axis, :func:`velocity_axis` [km/s].
    amp : array_like, shape (n_walkers,)
        Mismatch amplitude as a fraction of the model flux, > 0.
    rho : array_like, shape (n_walkers,)
        Correlation length [km/s], > 0.
    jitter2 : array_like, shape (n_walkers,)
        Factor of ``err2``.
    rel_pixel : array_like, shape (n_pix,)
        Relative variance per pixel (e.g. the interpolation error), a fraction^2.
    rel_walker : array_like, shape (n_walkers,)
        Relative variance per walker (e.g. the white mismatch term), a fraction^2.
    design : array_like, shape (K, n_pix), optional
        Legendre design of the calibration polynomial; None for no polynomial.
    prior_sigma : float
        Prior standard deviation of the polynomial's coefficients.
    steps : tuple, optional
        ``_steps(t)`` when the caller keeps it.

    Returns
    -------
    ndarray, shape (n_walkers,)
        log N(d; m, diag(var) + m m^T o (a^2 K) + (m A) Lambda (m A)^T) in flux units
        (tests/test_mismatch.py: the dense multivariate normal to 1e-8).
    """
    m = np.atleast_2d(np.asarray(model, float))
    nw, n = m.shape
    dtu, step = _steps(np.asarray(t, float)) if steps is None else steps
    amp, rho = _as_walkers(amp, nw), _as_walkers(rho, nw)
    E = np.exp(-np.outer(dtu, _SQRT3 / rho))
    A = (np.zeros((n, 0)) if design is None else np.asarray(design, float).T)
    G, logdet = _gram(E, step, np.asarray(t, float), np.ascontiguousarray(m.T),
                      np.asarray(data, float), np.asarray(err2, float),
                      np.broadcast_to(np.asarray(rel_pixel, float), (n,)),
                      _as_walkers(jitter2, nw), _as_walkers(rel_walker, nw), amp, rho,
                      np.ascontiguousarray(A))
    return _woodbury(G, logdet, n, A.shape[1], prior_sigma)
