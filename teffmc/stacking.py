r"""Several grids in one fit: Bayesian stacking of their predictive distributions.

Each grid is fitted on its own; the grids are then weighted by stacking of predictive
distributions (Yao, Vehtari, Simpson & Gelman 2018, "Using stacking to average Bayesian
predictive distributions", Bayesian Analysis 13, 917, their eq. 5, from memory):

    w = argmax_{w in simplex} sum_i log sum_k w_k exp(elpd_loo_{k,i}),

with elpd_loo_{k,i} the PSIS-LOO predictive density of data point i under grid k.
Unlike Bayesian model averaging it does not collapse on one grid when all grids are
wrong in different places (the usual case for model atmospheres), and it needs no
evidence. The combined posterior of a parameter is the mixture of the grids' posteriors
with these weights, read off by resampling each grid's draws in proportion to its weight.
"""

import numpy as np
from scipy.optimize import minimize
from scipy.special import logsumexp, softmax

__all__ = ["stacking_weights", "mixture_draws", "mixture_summary"]


def stacking_weights(lpd):
    """Stacking weights from pointwise LOO log predictive densities.

    Parameters
    ----------
    lpd : array_like, shape (n_models, n_points)

    Returns
    -------
    ndarray, shape (n_models,)
        Non-negative weights summing to one.
    """
    lpd = np.asarray(lpd, float)
    k = lpd.shape[0]
    if k == 1:
        return np.ones(1)
    lpd = lpd - lpd.max(axis=0)          # per point: the objective shifts by a constant

    def objective(z):                    # weights = softmax([0, z]) stays on the simplex
        w = softmax(np.concatenate([[0.0], z]))
        mix = logsumexp(lpd, axis=0, b=w[:, None])
        g_mix = np.exp(lpd - mix)                         # d mix / d w_k
        grad_w = -g_mix.sum(axis=1)
        grad_z = (w * (grad_w - w @ grad_w))[1:]          # chain rule through softmax
        return -mix.sum(), grad_z

    best = None
    for start in (np.zeros(k - 1), *np.eye(k - 1) * 3.0):  # convex in w; a few starts
        res = minimize(objective, start, jac=True, method="BFGS")
        if best is None or res.fun < best.fun:
            best = res
    return softmax(np.concatenate([[0.0], best.x]))


def mixture_draws(draws, weights, n, rng):
    """``n`` draws of the weighted mixture of per-model draw sets ``[(m_k,), ...]``."""
    weights = np.asarray(weights, float)
    counts = rng.multinomial(n, weights / weights.sum())
    parts = [rng.choice(np.asarray(d, float), size=c, replace=True)
             for d, c in zip(draws, counts) if c]
    return np.concatenate(parts)


def mixture_summary(draws, weights, rng, n=20000):
    """``{median, p16, p84, p2.5, p97.5}`` of the weighted mixture."""
    x = mixture_draws(draws, weights, n, rng)
    p = np.percentile(x, [2.5, 16, 50, 84, 97.5])
    return {"median": float(p[2]), "p16": float(p[1]), "p84": float(p[3]),
            "p2.5": float(p[0]), "p97.5": float(p[4])}
