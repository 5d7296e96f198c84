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

Leave-one-out terms (:func:`correlated_loo_pointwise`) are the non-factorised normal
model's exact conditionals log p(d_i | d_-i, theta) (Burkner, Gabry & Vehtari 2021,
"Efficient leave-one-out cross-validation for Bayesian non-factorized normal and
Student-t models", Comput. Stat. 36, 1243), computed by combining a forward and a
backward filter (the polynomial coefficients ride along as constant states, so the
polynomial stays marginalised).
"""

import numba
import numpy as np

from ..constants import C_KMS

__all__ = ["C_KMS", "MISMATCH_KINDS", "velocity_axis", "correlated_loglike",
           "correlated_loglike_parts",
           "correlated_loo_pointwise", "matern32"]

MISMATCH_KINDS = ("none", "white", "correlated")
_LOG_2PI = np.log(2.0 * np.pi)
_SQRT3 = np.sqrt(3.0)


def velocity_axis(wave):
    """c ln(lambda) [km/s] of ascending wavelengths: the kernel's stationary axis."""
    return C_KMS * np.log(np.asarray(wave, float))


def matern32(dv, amp, rho):
    """Matern-3/2 covariance ``amp^2 (1 + sqrt3 |dv|/rho) exp(-sqrt3 |dv|/rho)``."""
    x = _SQRT3 * np.abs(dv) / rho
    return amp * amp * (1.0 + x) * np.exp(-x)


@numba.njit(cache=True, fastmath=True)
def _gram(t, D, amp, rho, u, A):  # pragma: no cover - compiled
    """Whitened Gram matrix of [u, A] under diag(D) + amp^2 K_rho, per walker.

    t (n,), D (n, nw), amp and rho (nw,), u (n, nw), A (n, K). Returns the upper
    triangle of the (K+1)x(K+1) Gram matrix, flattened (NG, nw), and log det (nw,).
    The walker loop is innermost so the compiler vectorises it.
    """
    n, nw = D.shape
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
    E = np.empty((J, nw))
    f00 = np.empty(nw)
    f01 = np.empty(nw)
    f10 = np.empty(nw)
    f11 = np.empty(nw)
    k0 = np.empty(nw)
    k1 = np.empty(nw)
    rs = np.empty(nw)
    S = np.empty(nw)
    for i in range(n):
        if i > 0:
            dt = t[i] - t[i - 1]
            for w in range(nw):
                ld = lam[w] * dt
                ex = np.exp(-ld)
                f00[w] = ex * (1.0 + ld)
                f01[w] = ex * dt
                f10[w] = -ex * lam[w] * ld
                f11[w] = ex * (1.0 - ld)
            for w in range(nw):
                # P <- F (P - Pinf) F^T + Pinf (stationary process, numerically stable)
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
        for w in range(nw):
            s = P00[w] + D[i, w]
            S[w] = s
            inv = 1.0 / s
            k0[w] = P00[w] * inv
            k1[w] = P01[w] * inv
            rs[w] = np.sqrt(inv)
            logdet[w] += np.log(s)
        for w in range(nw):
            v = u[i, w] - X0[0, w]
            X0[0, w] += k0[w] * v
            X1[0, w] += k1[w] * v
            E[0, w] = v * rs[w]
        for j in range(1, J):
            aij = A[i, j - 1]
            for w in range(nw):
                v = aij - X0[j, w]
                X0[j, w] += k0[w] * v
                X1[j, w] += k1[w] * v
                E[j, w] = v * rs[w]
        g = 0
        for j in range(J):
            for m in range(j, J):
                for w in range(nw):
                    G[g, w] += E[j, w] * E[m, w]
                g += 1
        for w in range(nw):
            s = S[w]
            P11[w] -= k1[w] * k1[w] * s
            P01[w] -= k0[w] * k1[w] * s
            P00[w] -= k0[w] * k0[w] * s
    return G, logdet


def _as_walkers(a, nw):
    return np.broadcast_to(np.asarray(a, float), (nw,)).copy()


def correlated_loglike(data, var, model, t, amp, rho, design=None, prior_sigma=0.2):
    """Log-likelihood with a Matern-3/2 mismatch term (and the polynomial marginalised).

    Parameters
    ----------
    data : array_like, shape (n_pix,)
        Observed flux.
    var : array_like, shape (n_pix,) or (n_walkers, n_pix)
        Measurement variance [flux^2].
    model : array_like, shape (n_walkers, n_pix)
        Model flux before calibration, > 0.
    t : array_like, shape (n_pix,)
        Ascending kernel axis, :func:`velocity_axis` [km/s].
    amp : array_like, shape (n_walkers,)
        Mismatch amplitude as a fraction of the model flux, > 0.
    rho : array_like, shape (n_walkers,)
        Correlation length [km/s], > 0.
    design : array_like, shape (K, n_pix), optional
        Legendre design of the calibration polynomial; None for no polynomial.
    prior_sigma : float
        Prior standard deviation of the polynomial's coefficients.

    Returns
    -------
    ndarray, shape (n_walkers,)
        log N(d; m, diag(var) + m m^T o (a^2 K) + (m A) Lambda (m A)^T) in flux units.
    """
    m = np.atleast_2d(np.asarray(model, float))
    nw, n = m.shape
    d = np.asarray(data, float)
    u = ((d[None, :] - m) / m).T.copy()
    D = np.broadcast_to(np.asarray(var, float), (nw, n)).T / (m.T * m.T)
    A = (np.zeros((n, 0)) if design is None else np.asarray(design, float).T).copy()
    G, logdet = _gram(np.asarray(t, float), np.ascontiguousarray(D), _as_walkers(amp, nw),
                      _as_walkers(rho, nw), u, A)
    return _woodbury(G, logdet + 2.0 * np.sum(np.log(m), axis=1), n, A.shape[1], prior_sigma)


# error_model="numpy": no zero-division checks, which keep loops from vectorising
@numba.njit(cache=True, fastmath=True, error_model="numpy")
def _gram_parts(E, step, t, mT, d, e2, rp, jit2, rw, amp, rho, A):  # pragma: no cover
    """:func:`_gram` with the relative residual and variance formed inside the loop.

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
    """:func:`correlated_loglike` with the variance given by its parts (faster).

    The measurement variance is ``jitter2 * err2 + (rel_pixel + rel_walker) * model^2``
    (``jitter2`` and ``rel_walker`` per walker (n_walkers,), ``err2`` and ``rel_pixel``
    per pixel (n_pix,)): the relative residual and variance are formed inside the
    compiled filter (no (n_walkers, n_pix) temporaries). ``steps``: the result of
    ``_steps(t)`` when the caller keeps it. Same value as :func:`correlated_loglike`
    to rounding (tests/test_mismatch.py).
    """
    m = np.atleast_2d(np.asarray(model, float))
    nw, n = m.shape
    dtu, step = _steps(np.asarray(t, float)) if steps is None else steps
    amp, rho = _as_walkers(amp, nw), _as_walkers(rho, nw)
    E = np.exp(-np.outer(dtu, _SQRT3 / rho))
    A = (np.zeros((n, 0)) if design is None else np.asarray(design, float).T)
    G, logdet = _gram_parts(E, step, np.asarray(t, float), np.ascontiguousarray(m.T),
                            np.asarray(data, float), np.asarray(err2, float),
                            np.broadcast_to(np.asarray(rel_pixel, float), (n,)),
                            _as_walkers(jitter2, nw), _as_walkers(rel_walker, nw), amp, rho,
                            np.ascontiguousarray(A))
    return _woodbury(G, logdet, n, A.shape[1], prior_sigma)


@numba.njit(cache=True)
def _inv_spd(P, out):  # pragma: no cover - compiled
    """Inverse of a small symmetric positive-definite matrix (Cholesky, in place)."""
    n = P.shape[0]
    L = np.zeros((n, n))
    for j in range(n):
        s = P[j, j]
        for k in range(j):
            s -= L[j, k] * L[j, k]
        L[j, j] = np.sqrt(s)
        for i in range(j + 1, n):
            s = P[i, j]
            for k in range(j):
                s -= L[i, k] * L[j, k]
            L[i, j] = s / L[j, j]
    Li = np.zeros((n, n))
    for j in range(n):
        Li[j, j] = 1.0 / L[j, j]
        for i in range(j + 1, n):
            s = 0.0
            for k in range(j, i):
                s -= L[i, k] * Li[k, j]
            Li[i, j] = s / L[i, i]
    for i in range(n):
        for j in range(i + 1):
            s = 0.0
            for k in range(i, n):
                s += Li[k, i] * Li[k, j]
            out[i, j] = s
            out[j, i] = s


@numba.njit(cache=True)
def _filter_pred(t, D, y, H, P0, lam):  # pragma: no cover - compiled
    """Predicted (before the update) state means and covariances of a forward filter.

    State: [f, f', c_1..c_K]; f Matern-3/2 with rate lam, c constant with prior P0.
    """
    n = t.size
    S = P0.shape[0]
    mu = np.zeros((n, S))
    Ps = np.zeros((n, S, S))
    x = np.zeros(S)
    P = P0.copy()
    F = np.eye(S)
    for i in range(n):
        if i > 0:
            dt = abs(t[i] - t[i - 1])
            ld = lam * dt
            ex = np.exp(-ld)
            F[0, 0] = ex * (1.0 + ld)
            F[0, 1] = ex * dt
            F[1, 0] = -ex * lam * ld
            F[1, 1] = ex * (1.0 - ld)
            x = F @ x
            P = F @ (P - P0) @ F.T + P0   # constant states: F = 1, no process noise
        mu[i] = x
        Ps[i] = P
        h = H[i]
        Ph = P @ h
        s = h @ Ph + D[i]
        k = Ph / s
        x = x + k * (y[i] - h @ x)
        P = P - np.outer(k, Ph)
        P = 0.5 * (P + P.T)
    return mu, Ps


@numba.njit(cache=True)
def _loo_one(t, D, y, H, P0, lam):  # pragma: no cover - compiled
    n = t.size
    S = P0.shape[0]
    muf, Pf = _filter_pred(t, D, y, H, P0, lam)
    mub, Pb = _filter_pred(t[::-1].copy(), D[::-1].copy(), y[::-1].copy(),
                           H[::-1].copy(), P0, lam)
    J0 = np.zeros((S, S))
    for j in range(S):
        J0[j, j] = 1.0 / P0[j, j]
    Jf = np.empty((S, S))
    Jb = np.empty((S, S))
    Sig = np.empty((S, S))
    out = np.empty(n)
    for i in range(n):
        ib = n - 1 - i
        mb = mub[ib].copy()
        Pbi = Pb[ib].copy()
        mb[1] = -mb[1]                   # the reversed process runs f' backwards
        for j in range(S):
            Pbi[1, j] = -Pbi[1, j]
        for j in range(S):
            Pbi[j, 1] = -Pbi[j, 1]
        _inv_spd(Pf[i], Jf)
        _inv_spd(Pbi, Jb)
        _inv_spd(Jf + Jb - J0, Sig)
        mean = Sig @ (Jf @ muf[i] + Jb @ mb)
        h = H[i]
        v = h @ Sig @ h + D[i]
        r = y[i] - h @ mean
        out[i] = -0.5 * (_LOG_2PI + np.log(v) + r * r / v)
    return out


def correlated_loo_pointwise(data, var, model, t, amp, rho, design=None, prior_sigma=0.2):
    """Leave-one-pixel-out terms log p(d_i | d_-i, theta), shape (n_walkers, n_pix).

    Same arguments as :func:`correlated_loglike`. These are the pointwise terms that
    PSIS-LOO needs for a non-factorised normal model (Burkner, Gabry & Vehtari 2021):
    they do not add up to the log-likelihood (the pixels are not independent).
    """
    m = np.atleast_2d(np.asarray(model, float))
    nw, n = m.shape
    d = np.asarray(data, float)
    var = np.broadcast_to(np.asarray(var, float), (nw, n))
    amp, rho = _as_walkers(amp, nw), _as_walkers(rho, nw)
    A = np.zeros((n, 0)) if design is None else np.asarray(design, float).T
    k = A.shape[1]
    H = np.zeros((n, 2 + k))
    H[:, 0] = 1.0
    H[:, 2:] = A
    t = np.asarray(t, float)
    out = np.empty((nw, n))
    for w in range(nw):
        lam = _SQRT3 / rho[w]
        P0 = np.diag(np.concatenate([[amp[w] ** 2, (amp[w] * lam) ** 2],
                                     np.full(k, float(prior_sigma) ** 2)]))
        u = (d - m[w]) / m[w]
        out[w] = _loo_one(t, var[w] / m[w] ** 2, u, H, P0, lam) - np.log(m[w])
    return out
