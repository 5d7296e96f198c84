"""Statistical-only intervals beside the marginalised ones: "value +- stat +- sys".

With grid-physics nuisances sampled, the marginal posterior of a parameter carries both
the data's noise and the grid's physical uncertainty. The interval with the nuisances
held at their nominal values (x = ln scale = 0) is read off the same draws by linear
regression on the nuisance coordinates,

    v_stat = v - beta . x,   beta = Cov(x, x)^-1 Cov(x, v),

which is the conditional distribution at x = 0 when the posterior is close to normal in
(v, x) (the regression form of the conditional normal; common practice, no source). The
systematic part is then sqrt(width^2 - width_stat^2) in quadrature.
"""

import numpy as np

__all__ = ["stat_only_draws", "stat_summary"]


def stat_only_draws(values, x):
    """Draws of ``values`` (n,) conditioned on nuisance coordinates ``x`` (n, k) = 0."""
    v = np.asarray(values, float)
    x = np.atleast_2d(np.asarray(x, float).T).T
    xc = x - x.mean(axis=0)
    beta, *_ = np.linalg.lstsq(xc, v - v.mean(), rcond=None)
    return v - x @ beta


def stat_summary(values, x):
    """``{"median_stat", "p16_stat", "p84_stat"}`` of :func:`stat_only_draws`."""
    s = stat_only_draws(values, x)
    if not np.all(np.isfinite(s)):
        return {}
    p16, p50, p84 = np.percentile(s, [16, 50, 84])
    return {"median_stat": float(p50), "p16_stat": float(p16), "p84_stat": float(p84)}
