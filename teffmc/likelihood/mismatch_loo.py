r"""Leave-one-pixel-out terms of a spectrum with the correlated model-mismatch term.

The pointwise terms of :func:`correlated_loo_pointwise` are the non-factorised normal
model's exact conditionals log p(d_i | d_-i, theta) (Burkner, Gabry & Vehtari 2021,
"Efficient leave-one-out cross-validation for Bayesian non-factorized normal and
Student-t models", Comput. Stat. 36, 1243), computed by combining a forward and a
backward filter (the polynomial coefficients ride along as constant states, so the
polynomial stays marginalised).

The model is that of :mod:`teffmc.likelihood.mismatch`.
"""

import numba
import numpy as np

from .mismatch import _LOG_2PI, _SQRT3, _as_walkers

__all__ = ["correlated_loo_pointwise"]


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

    ``var`` (n_pix,) or (n_walkers, n_pix) is the measurement variance [flux^2]; the
    other arguments are those of :func:`correlated_loglike_parts`. These are the
    pointwise terms that
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
