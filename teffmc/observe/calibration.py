r"""Flux-calibration polynomial, marginalised analytically; a Student-t option.

Model
-----
For one spectrum of n pixels with data d, noise variance s^2 (S = diag(s^2))
and a walker's model m, the data are

    d = m * (1 + sum_k c_k P_k(x)) + noise,   noise ~ N(0, S),

with P_k the Legendre polynomials, x in [-1, 1] across the spectrum, k = 0..K-1
(k = 0 is an overall scale error) and a Gaussian prior c ~ N(0, Lambda),
Lambda = diag(prior_sigma^2). With A_ik = P_k(x_i), B = diag(m) A and
r = d - m, the residual is r = B c + noise, so integrating over c gives

    r ~ N(0, C),   C = S + B Lambda B^T.

Woodbury's identity and the matrix determinant lemma reduce the n x n
problem to K x K. With the normal matrix and vector

    M = Lambda^-1 + B^T S^-1 B,   b = B^T S^-1 r,

    r^T C^-1 r = r^T S^-1 r - b^T M^-1 b,
    log det C  = log det S + log det Lambda + log det M,

    log L = -1/2 [r^T S^-1 r - b^T M^-1 b + log det S + log det Lambda
                  + log det M + n log(2 pi)].

The posterior of c given the data is N(M^-1 b, M^-1), so the posterior-mean
calibration is 1 + A M^-1 b. All of this is vectorised over walkers: the
cost is O(n_walkers * n * K^2) (two matrix products) plus K x K solves.
"""

from typing import NamedTuple

import numba
import numpy as np
from scipy.special import gammaln

from teffmc.errors import ConfigError, DataError

__all__ = [
    "CalibrationPosterior",
    "calibration_mean",
    "legendre_design",
    "marginal_loglike",
    "marginal_loglike_fast",
    "posterior_calibration",
    "student_t_loglike",
    "student_t_pointwise",
]

_LOG_2PI = np.log(2.0 * np.pi)


def legendre_design(wave, order):
    """Design matrix A_ik = P_k(x_i), x mapped linearly from [min, max] wave to [-1, 1].

    Parameters
    ----------
    wave : array_like, shape (n_pix,)
        Wavelengths of the pixels used [Angstrom].
    order : int
        Highest polynomial degree (0 = a scale factor only).

    Returns
    -------
    ndarray, shape (n_pix, order + 1)
    """
    if int(order) != order or order < 0:
        raise ConfigError(
            f"should be an integer >= 0 but got {order}", key="calibration_order", value=order
        )
    w = np.asarray(wave, dtype=float)
    span = w.max() - w.min()
    x = 2.0 * (w - w.min()) / span - 1.0 if span > 0 else np.zeros_like(w)
    return np.polynomial.legendre.legvander(x, int(order))


def _prior_var(prior_sigma, k):
    sig = np.broadcast_to(np.asarray(prior_sigma, dtype=float), (k,))
    if not (np.isfinite(sig).all() and (sig > 0).all()):
        bad = sig[~(np.isfinite(sig) & (sig > 0))][0]
        raise ConfigError(f"should be finite and > 0 but got {bad}", key="prior_sigma", value=bad)
    return sig**2


def _design(design, n_pix):
    """Return the design as (n_pix, K); a (K, n_pix) array is accepted and transposed."""
    A = np.asarray(design, dtype=float)
    if A.ndim == 2 and A.shape[0] != n_pix and A.shape[1] == n_pix:
        A = A.T
    return A


def _normal_equations(data, var, model, design, prior_sigma):
    d = np.asarray(data, dtype=float)
    m = np.asarray(model, dtype=float)
    s2 = np.asarray(var, dtype=float)
    A = _design(design, d.shape[-1])
    n, k = A.shape
    for label, arr in (("data", d), ("var", s2), ("model", m)):
        if arr.shape[-1] != n:
            raise DataError(
                f"last axis should have {n} pixels (design rows) but has shape {arr.shape}",
                column=label,
                value=arr.shape,
            )
    lam = _prior_var(prior_sigma, k)
    iv = 1.0 / s2
    r = d - m
    mw = m * iv
    # G = B^T S^-1 B for every walker, as one product with the K^2 outer products of A.
    outer = (A[:, :, None] * A[:, None, :]).reshape(n, k * k)
    G = ((mw * m) @ outer).reshape(*mw.shape[:-1], k, k)
    M = G + np.diag(1.0 / lam)
    b = (mw * r) @ A
    chi2 = np.sum(r * r * iv, axis=-1)
    logdet_s = np.sum(np.log(s2), axis=-1)
    return M, b, chi2, logdet_s, np.sum(np.log(lam)), n, A


@numba.njit(cache=True, fastmath=True, error_model="numpy")
def _normal_sums(d, var, m, A):  # pragma: no cover - compiled
    """Accumulate per walker G = B^T S^-1 B, b = B^T S^-1 r, chi2 = r^T S^-1 r, log det S.

    One pass over the pixels (no (walkers x pixels) temporaries); G is the upper triangle.
    var and m (nw, n), A (n, K). log det S is summed as logs of products of 8 variances
    relative to the walker's first (each ratio far from over/underflow).
    """
    nw, n = m.shape
    k = A.shape[1]
    ng = k * (k + 1) // 2
    G = np.zeros((nw, ng))
    b = np.zeros((nw, k))
    chi2 = np.zeros(nw)
    logdet = np.zeros(nw)
    for w in range(nw):
        v0 = var[w, 0]
        ld = n * np.log(v0)
        prod = 1.0
        c2 = 0.0
        for i in range(n):
            iv = 1.0 / var[w, i]
            mi = m[w, i]
            r = d[i] - mi
            c2 += r * r * iv
            prod *= var[w, i] / v0
            if i % 8 == 7:
                ld += np.log(prod)
                prod = 1.0
            mw = mi * iv
            g = 0
            for p in range(k):
                ap = A[i, p]
                b[w, p] += mw * r * ap
                for q in range(p, k):
                    G[w, g] += mw * mi * ap * A[i, q]
                    g += 1
        chi2[w] = c2
        logdet[w] = ld + np.log(prod)
    return G, b, chi2, logdet


def marginal_loglike_fast(data, var, model, design, prior_sigma):
    """Compute :func:`marginal_loglike` for many walkers by one compiled pass.

    ``var`` and ``model`` have shape (n_walkers, n_pix), the design (K, n_pix) or
    (n_pix, K); the value is the same to rounding (tests/test_observe_calibration.py).
    """
    m = np.ascontiguousarray(model, dtype=float)
    v = np.ascontiguousarray(np.broadcast_to(np.asarray(var, dtype=float), m.shape))
    A = np.ascontiguousarray(_design(design, m.shape[-1]))
    k = A.shape[1]
    lam = _prior_var(prior_sigma, k)
    G, b, chi2, logdet_s = _normal_sums(np.asarray(data, dtype=float), v, m, A)
    M = np.zeros((m.shape[0], k, k))
    for g, (i, j) in enumerate(zip(*np.triu_indices(k))):
        M[:, i, j] = M[:, j, i] = G[:, g]
    M += np.diag(1.0 / lam)
    L = np.linalg.cholesky(M)
    y = np.linalg.solve(L, b[..., None])[..., 0]
    logdet_m = 2.0 * np.sum(np.log(np.diagonal(L, axis1=-2, axis2=-1)), axis=-1)
    return -0.5 * (chi2 - np.sum(y * y, axis=-1) + logdet_s + np.sum(np.log(lam)) + logdet_m
                   + m.shape[-1] * _LOG_2PI)


def marginal_loglike(data, var, model, design, prior_sigma):
    """Log-likelihood marginalised over the calibration polynomial.

    Parameters
    ----------
    data : array_like, shape (n_pix,)
        Observed flux [any flux unit, the same for model].
    var : array_like, shape (n_pix,) or (n_walkers, n_pix)
        Noise variance [flux^2]; per walker when a jitter term is fitted.
    model : array_like, shape (n_walkers, n_pix) or (n_pix,)
        Model flux of each walker.
    design : array_like, shape (n_pix, K)
        From :func:`legendre_design` (the transpose, (K, n_pix), is also
        accepted when n_pix != K).
    prior_sigma : float or array_like of shape (K,)
        Prior standard deviation of each coefficient [dimensionless], > 0.

    Returns
    -------
    ndarray, shape (n_walkers,) (or () for a 1-D model)
        log N(d - m; 0, S + B Lambda B^T), see the module notes.
    """
    M, b, chi2, logdet_s, logdet_lam, n, _ = _normal_equations(
        data, var, model, design, prior_sigma
    )
    L = np.linalg.cholesky(M)
    y = np.linalg.solve(L, b[..., None])[..., 0]  # b^T M^-1 b = |L^-1 b|^2
    logdet_m = 2.0 * np.sum(np.log(np.diagonal(L, axis1=-2, axis2=-1)), axis=-1)
    return -0.5 * (chi2 - np.sum(y * y, axis=-1) + logdet_s + logdet_lam + logdet_m + n * _LOG_2PI)


class CalibrationPosterior(NamedTuple):
    """Posterior of the calibration coefficients for each walker."""

    mean: np.ndarray  #: (n_walkers, K) posterior mean of c
    cov: np.ndarray  #: (n_walkers, K, K) posterior covariance of c
    poly: np.ndarray  #: (n_walkers, n_pix) posterior-mean calibration 1 + A c


def posterior_calibration(data, var, model, design, prior_sigma):
    """Posterior of the calibration polynomial (for plots and diagnostics).

    Same parameters as :func:`marginal_loglike`. The model times ``poly`` is
    the calibrated model to draw over the data.

    Returns
    -------
    CalibrationPosterior
    """
    M, b, *_, A = _normal_equations(data, var, model, design, prior_sigma)
    cov = np.linalg.inv(M)
    mean = np.einsum("...kl,...l->...k", cov, b)
    return CalibrationPosterior(mean, cov, 1.0 + mean @ A.T)


def calibration_mean(data, var, model, design, prior_sigma):
    """Posterior mean of the calibration polynomial minus one, sum_k c_k P_k(x).

    Same parameters as :func:`marginal_loglike`; the calibrated model is
    ``model * (1 + calibration_mean(...))``.

    Returns
    -------
    ndarray, shape (n_walkers, n_pix)
    """
    return posterior_calibration(data, var, model, design, prior_sigma).poly - 1.0


def _check_nu(nu):
    if not (np.isfinite(nu) and nu > 0):
        raise ConfigError(f"should be finite and > 0 but got {nu}", key="student_nu", value=nu)


def _student_t_terms(r, s2, nu):
    """Per-pixel Student-t log density of residuals ``r`` with squared scale ``s2``."""
    const = gammaln(0.5 * (nu + 1.0)) - gammaln(0.5 * nu) - 0.5 * np.log(nu * np.pi)
    return const - 0.5 * np.log(s2) - 0.5 * (nu + 1.0) * np.log1p(r * r / (nu * s2))


def student_t_loglike(data, var, model, nu):
    """Student-t log-likelihood, robust against outlying pixels.

    Each pixel's residual is t-distributed with ``nu`` degrees of freedom and
    scale s (so s^2 is the variance only as nu -> infinity):

        log p = lnG((nu+1)/2) - lnG(nu/2) - 1/2 log(nu pi s^2)
                - (nu+1)/2 log(1 + r^2 / (nu s^2)).

    It has no closed-form marginalisation over the calibration polynomial;
    use it with a calibration fixed (e.g. at the Gaussian posterior mean)
    or with the coefficients as sampled parameters.

    Parameters
    ----------
    data : array_like, shape (n_pix,)
    var : array_like, shape (n_pix,) or (n_walkers, n_pix)
        Squared scale [flux^2].
    model : array_like, shape (n_walkers, n_pix)
    nu : float
        Degrees of freedom, > 0 (small = heavy tails; ~4 is common practice, no source).

    Returns
    -------
    ndarray, shape (n_walkers,)
        The sum over pixels of :func:`student_t_pointwise`.
    """
    _check_nu(nu)
    s2 = np.asarray(var, dtype=float)
    r = np.asarray(data, dtype=float) - np.asarray(model, dtype=float)
    per_pix = _student_t_terms(r, s2, nu)
    return np.sum(np.broadcast_to(per_pix, np.broadcast_shapes(r.shape, s2.shape)), axis=-1)


def student_t_pointwise(data, var, model, nu, max_elements=1 << 20):
    """Per-pixel terms of :func:`student_t_loglike` (same arguments), for PSIS-LOO.

    Vectorised over walkers and pixels at once; the walkers are taken in blocks of
    at most ``max_elements`` array elements so the temporaries stay bounded
    (~8 MB each by default) however many draws are passed. The terms of a walker
    sum to its :func:`student_t_loglike`.

    Returns
    -------
    ndarray, shape ``broadcast(data, var, model)``: (n_walkers, n_pix), or (n_pix,)
    """
    _check_nu(nu)
    data = np.asarray(data, dtype=float)
    s2 = np.asarray(var, dtype=float)
    model = np.asarray(model, dtype=float)
    shape = np.broadcast_shapes(data.shape, s2.shape, model.shape)
    if len(shape) < 2:
        return np.broadcast_to(_student_t_terms(data - model, s2, nu), shape).copy()
    d2, s2, m2 = (np.broadcast_to(a, shape).reshape(-1, shape[-1]) for a in (data, s2, model))
    out = np.empty(d2.shape)
    step = max(1, int(max_elements) // max(1, shape[-1]))
    for i in range(0, out.shape[0], step):
        blk = slice(i, i + step)
        out[blk] = _student_t_terms(d2[blk] - m2[blk], s2[blk], nu)
    return out.reshape(shape)
