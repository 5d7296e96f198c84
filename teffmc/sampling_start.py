"""Starting points for the sampler: a multi-start optimum and a ball of walkers around it.

Both functions take a vectorised log-probability ``log_prob(x)`` with ``x`` of shape
``(n, ndim)`` returning ``(n,)``, equal to ``-inf`` outside the priors (``nan`` is
treated as ``-inf``).
"""

import numpy as np
from scipy.optimize import minimize

from teffmc.errors import ConfigError, TeffmcError

__all__ = ["find_start", "initial_ball", "laplace_covariance", "laplace_ball"]

# Stand-in for -log_prob = +inf: Nelder-Mead only compares values, but a finite number
# keeps its convergence test (differences of simplex values) free of inf - inf warnings.
_OUTSIDE = 1e300


def _finite_log_prob(log_prob, x):
    """Evaluate ``log_prob`` on a batch, mapping nan to -inf and checking the shape."""
    x = np.atleast_2d(np.asarray(x, dtype=float))
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        lp = np.asarray(log_prob(x), dtype=float)
    if lp.shape != (x.shape[0],):
        raise TeffmcError(
            f"log_prob should return shape ({x.shape[0]},) for {x.shape[0]} walkers "
            f"but returned shape {lp.shape}"
        )
    return np.where(np.isnan(lp), -np.inf, lp)


class _Scaled:
    """-log_prob in coordinates z = (x - centre) / spread of the prior draws.

    So one tolerance suits every parameter; with the optimiser's box in z.
    """

    def __init__(self, log_prob, draws, lp, bounds):
        self.log_prob = log_prob
        good = draws[np.isfinite(lp)]
        centre = good.mean(axis=0)
        spread = draws.std(axis=0)
        self.centre = centre
        self.spread = np.where(spread > 0, spread, np.maximum(np.abs(centre) * 0.05, 1e-3))
        self.zbounds, self.lo, self.hi = None, -np.inf, np.inf
        if bounds is not None:
            self.zbounds = [
                tuple(None if b is None else (b - c) / s for b in pair)
                for pair, c, s in zip(bounds, centre, self.spread, strict=True)
            ]
            self.lo = np.array([-np.inf if b[0] is None else b[0] for b in self.zbounds])
            self.hi = np.array([np.inf if b[1] is None else b[1] for b in self.zbounds])

    def objective(self, z):
        value = _finite_log_prob(self.log_prob, self.centre + self.spread * z)[0]
        return -value if np.isfinite(value) else _OUTSIDE

    def value_and_grad(self, z):
        # one vectorised call: the point and its central-difference stencil
        h = 1e-5
        pts = self.centre + self.spread * np.vstack([z, z + h * np.eye(z.size),
                                                     z - h * np.eye(z.size)])
        f = -_finite_log_prob(self.log_prob, pts)
        if not np.isfinite(f[0]):
            return _OUTSIDE, np.zeros(z.size)
        up, down = f[1:z.size + 1], f[z.size + 1:]
        grad = np.where(np.isfinite(up) & np.isfinite(down), (up - down) / (2 * h),
                        np.where(np.isfinite(up), (up - f[0]) / h,
                                 np.where(np.isfinite(down), (f[0] - down) / h, 0.0)))
        return f[0], grad

    def polish(self, x, step):
        """(x, log_prob) after a gradient polish and a short Nelder-Mead from ``x``."""
        # prior draws may lie outside bounds
        z0 = np.clip((x - self.centre) / self.spread, self.lo, self.hi)
        # a gradient method first (each gradient one batch of 2 ndim + 1 points: far
        # cheaper than Nelder-Mead's one point per call on a narrow posterior), then a
        # short Nelder-Mead from its end (robust where the gradient is not)
        with np.errstate(over="ignore", invalid="ignore"):
            grad_res = minimize(self.value_and_grad, z0, jac=True, method="L-BFGS-B",
                                bounds=self.zbounds, options={"maxiter": 200})
        if np.isfinite(grad_res.fun) and grad_res.fun < self.objective(z0):
            z0 = np.clip(grad_res.x, self.lo, self.hi)
        simplex = np.vstack([z0, z0 + step * np.eye(z0.size)])
        res = minimize(
            self.objective, z0, method="Nelder-Mead", bounds=self.zbounds,
            # a start only needs to be near the mode (the Laplace start and burn-in do
            # the rest): 1e-3 in log-probability is far below its posterior spread of
            # ~ndim/2
            options={"initial_simplex": simplex, "xatol": 1e-4, "fatol": 1e-3,
                     "maxiter": 40 * z0.size},
        )
        return (self.centre + self.spread * res.x,
                (-res.fun if res.fun < _OUTSIDE else -np.inf))


def _spread_candidates(draws, lp, n_polish):
    """Pick the draws to polish: the best in each of ``n_polish`` slices of Teff.

    Slices of the first parameter (Teff), so that the candidates spread over it.

    The best draws overall can all lie in one wrong basin: with the model-mismatch
    hyperparameters drawn from their priors, a draw's log-probability says little about
    its Teff, and a star whose true Teff no candidate came near converged to a hot,
    heavily reddened mode 320 in ln p below the true one (measured in the cross-model
    coverage bench). The overall best draw is always among the candidates.
    """
    ok = np.flatnonzero(np.isfinite(lp))
    n = min(n_polish, ok.size)
    slices = np.array_split(ok[np.argsort(draws[ok, 0], kind="stable")], n)
    picked = [int(s[np.argmax(lp[s])]) for s in slices]
    return sorted(picked, key=lambda i: -lp[i])


def find_start(log_prob, sample_prior, *, n_starts=16, rng, bounds=None, n_polish=4):
    """Find a high-posterior starting point by multi-start optimisation inside the priors.

    ``n_starts`` points are drawn from the prior; the best of each of ``n_polish`` slices
    of the first parameter (:func:`_spread_candidates`) are polished with
    Nelder-Mead on ``-log_prob`` (in coordinates scaled by the spread of the prior draws,
    so one tolerance suits every parameter), and the best result is polished once more.

    Parameters
    ----------
    log_prob : callable
        Vectorised log-probability, ``(n, ndim) -> (n,)``, ``-inf`` outside the priors.
    sample_prior : callable
        ``sample_prior(rng, n) -> (n, ndim)`` draws from the prior.
    n_starts : int, optional
        Number of prior draws (>= 1).
    rng : numpy.random.Generator
        Random generator for the prior draws.
    bounds : sequence of (low, high), optional
        Box passed to the optimiser; ``None`` entries mean unbounded.
    n_polish : int, optional
        Number of the best prior draws that are optimised.

    Returns
    -------
    numpy.ndarray
        The best point found, shape ``(ndim,)``, with finite ``log_prob``.

    Raises
    ------
    ConfigError
        If ``n_starts`` or ``n_polish`` is not a positive integer.
    TeffmcError
        If no prior draw, or no optimised point within ``bounds``, has a finite
        log-probability.
    """
    for key, value in (("n_starts", n_starts), ("n_polish", n_polish)):
        if int(value) != value or value < 1:
            raise ConfigError(f"should be a positive integer but got {value!r}", key=key)
    draws = np.atleast_2d(np.asarray(sample_prior(rng, int(n_starts)), dtype=float))
    lp = _finite_log_prob(log_prob, draws)
    if not np.isfinite(lp).any():
        raise TeffmcError(
            f"none of {n_starts} prior draws has a finite log-probability; "
            "check the priors and the data"
        )
    problem = _Scaled(log_prob, draws, lp, bounds)
    order = _spread_candidates(draws, lp, int(n_polish))
    best_x, best_lp = None, -np.inf
    for i in order:
        x, value = problem.polish(draws[i], 0.1)
        if value > best_lp:
            best_x, best_lp = x, value
    if best_x is None:
        raise TeffmcError(f"no point with finite log-probability found inside bounds {bounds}")
    x, value = problem.polish(best_x, 0.01)  # restart: Nelder-Mead can stall on a collapsed simplex
    return x if value > best_lp else best_x


def initial_ball(x, rng, n_walkers, log_prob, scale, *, max_rounds=60):
    """Place walkers in a small Gaussian ball around ``x``, all with finite log-probability.

    Walkers that land where ``log_prob`` is ``-inf`` are re-drawn; after every five
    rounds with failures the ball shrinks by a factor 2.

    Parameters
    ----------
    x : array_like, shape (ndim,)
        Centre of the ball; must have finite log-probability.
    rng : numpy.random.Generator
        Random generator.
    n_walkers : int
        Number of walkers.
    log_prob : callable
        Vectorised log-probability, ``(n, ndim) -> (n,)``.
    scale : float or array_like, shape (ndim,)
        Standard deviation of the ball per parameter [parameter units], > 0.
    max_rounds : int, optional
        Number of re-draw rounds before giving up.

    Returns
    -------
    numpy.ndarray
        Walker positions, shape ``(n_walkers, ndim)``.

    Raises
    ------
    ConfigError
        If ``scale`` is not positive or ``n_walkers`` < 1.
    TeffmcError
        If ``x`` has non-finite log-probability or the ball cannot be filled.
    """
    x = np.asarray(x, dtype=float)
    scale = np.broadcast_to(np.asarray(scale, dtype=float), x.shape).copy()
    if not np.all(scale > 0):
        raise ConfigError(f"should be > 0 but got {scale.tolist()}", key="scale")
    if int(n_walkers) != n_walkers or n_walkers < 1:
        raise ConfigError(f"should be a positive integer but got {n_walkers!r}", key="n_walkers")
    if not np.isfinite(_finite_log_prob(log_prob, x)[0]):
        raise TeffmcError(f"the ball centre {x.tolist()} has non-finite log-probability")
    ball = x + scale * rng.standard_normal((int(n_walkers), x.size))
    bad = ~np.isfinite(_finite_log_prob(log_prob, ball))
    for attempt in range(1, max_rounds + 1):
        if not bad.any():
            return ball
        if attempt % 5 == 0:
            scale = scale / 2
        ball[bad] = x + scale * rng.standard_normal((int(bad.sum()), x.size))
        bad[bad] = ~np.isfinite(_finite_log_prob(log_prob, ball[bad]))
    if bad.any():
        raise TeffmcError(
            f"{int(bad.sum())} of {n_walkers} walkers still have non-finite log-probability "
            f"after {max_rounds} re-draws around {x.tolist()}"
        )
    return ball


def _curvature_steps(log_prob, x, f0, h):
    """Return steps near one posterior sigma per parameter, from 1-D central differences.

    Three rounds: the step of a parameter with negative finite curvature becomes
    1/sqrt(-d2f/dx2) (kept within 1e-4..1e4 times the first step); others keep theirs.
    """
    n = x.size
    h0 = h.copy()
    for _ in range(3):
        pts = np.concatenate([x + np.diag(h), x - np.diag(h)])
        f = _finite_log_prob(log_prob, pts)
        with np.errstate(invalid="ignore"):
            curv = (f[:n] + f[n:] - 2.0 * f0) / h**2
        good = np.isfinite(curv) & (curv < 0)
        h = np.where(good, np.clip(1.0 / np.sqrt(np.where(good, -curv, 1.0)), 1e-4 * h0,
                                   1e4 * h0), h)
    return h


def laplace_covariance(log_prob, x, h):
    """Covariance of the Gaussian (Laplace) approximation of the posterior at its mode x.

    The Hessian of ``log_prob`` is taken by central differences with steps near one
    sigma (:func:`_curvature_steps`, starting from ``h``), all stencil points in one
    vectorised batch (2 ndim^2 points). Where a stencil point is outside the support
    (a mode on a prior edge) the off-diagonal term is dropped; eigenvalues of the
    negative Hessian below 1e-12 of the largest are raised to it.

    Returns
    -------
    numpy.ndarray, shape (ndim, ndim), or None when no curvature could be measured.
    """
    x = np.asarray(x, dtype=float)
    n = x.size
    f0 = _finite_log_prob(log_prob, x)[0]
    if not np.isfinite(f0):
        return None
    h = _curvature_steps(log_prob, x, f0, np.asarray(h, dtype=float))
    e = np.diag(h)
    i, j = np.triu_indices(n, 1)
    pts = [x + e, x - e, x + e[i] + e[j], x + e[i] - e[j], x - e[i] + e[j], x - e[i] - e[j]]
    f = _finite_log_prob(log_prob, np.concatenate(pts))
    fp, fm = f[:n], f[n:2 * n]
    k = i.size
    fpp, fpm, fmp, fmm = (f[2 * n + q * k:2 * n + (q + 1) * k] for q in range(4))
    with np.errstate(invalid="ignore"):     # -inf - -inf where a point is outside
        hess = np.diag((fp + fm - 2.0 * f0) / h**2)
        off = (fpp - fpm - fmp + fmm) / (4.0 * h[i] * h[j])
    off = np.where(np.isfinite(off), off, 0.0)
    hess[i, j] = hess[j, i] = off
    diag_ok = np.isfinite(np.diag(hess)) & (np.diag(hess) < 0)
    if not diag_ok.any():
        return None
    # parameters without a measured curvature (a mode on an edge): their step squared
    hess[~diag_ok, :] = hess[:, ~diag_ok] = 0.0
    hess[~diag_ok, ~diag_ok] = -1.0 / h[~diag_ok] ** 2
    lam, vec = np.linalg.eigh(-hess)
    lam = np.maximum(lam, 1e-12 * lam.max())
    return (vec / lam) @ vec.T


def laplace_ball(log_prob, x, rng, n_walkers, h, *, max_rounds=20):
    """Draw walkers from the Laplace approximation at the mode x: a start in the typical set.

    A ball of 1e-3 of the parameters around the mode has to expand by the ensemble's
    own moves before the chain samples the posterior (tens of autocorrelation times on
    a narrow, correlated posterior); walkers drawn from N(x, -H^-1) start where the
    posterior mass is. Walkers outside the support are redrawn (the covariance halved
    every fifth round). Falls back to :func:`initial_ball` with scale ``h`` when no
    curvature can be measured or the draws keep failing.

    Returns
    -------
    numpy.ndarray, shape (n_walkers, ndim)
    """
    x = np.asarray(x, dtype=float)
    cov = laplace_covariance(log_prob, x, h)
    if cov is None:
        return initial_ball(x, rng, n_walkers, log_prob, h)
    chol = np.linalg.cholesky(cov + 1e-300 * np.eye(x.size))
    ball = x + rng.standard_normal((int(n_walkers), x.size)) @ chol.T
    bad = ~np.isfinite(_finite_log_prob(log_prob, ball))
    for attempt in range(1, max_rounds + 1):
        if not bad.any():
            return ball
        if attempt % 5 == 0:
            chol = chol / np.sqrt(2.0)
        ball[bad] = x + rng.standard_normal((int(bad.sum()), x.size)) @ chol.T
        bad[bad] = ~np.isfinite(_finite_log_prob(log_prob, ball[bad]))
    if bad.any():   # keep the good draws, put the rest in a small ball around the mode
        ball[bad] = initial_ball(x, rng, int(bad.sum()), log_prob, h)
    return ball
