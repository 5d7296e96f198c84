"""PSIS-LOO with correlated residuals against brute-force leave-one-out refits.

Small problem with a known answer: n = 25 pixels, model theta x template, a Matern-3/2
mismatch term of known amplitude and length, a uniform prior on theta. The exact
leave-one-out predictive density of each pixel, log int p(y_i | y_-i, theta)
p(theta | y_-i) dtheta, is computed by refitting without the pixel (dense normal
likelihood of the other 24 pixels, quadrature over theta). PSIS-LOO (Vehtari, Gelman &
Gabry 2017) on posterior draws of the full fit with the non-factorised terms log p(y_i |
y_-i, theta) (Burkner, Gabry & Vehtari 2021) must reproduce it; independent-pixel terms
must not (the contrast is the point). arviz is the PSIS reference implementation here.
"""

import arviz as az
import numpy as np
from scipy.special import logsumexp
from scipy.stats import multivariate_normal

from teffmc.likelihood.mismatch import matern32, velocity_axis
from teffmc.likelihood.mismatch_loo import correlated_loo_pointwise

N, AMP, RHO = 25, 0.05, 800.0


def _problem():
    rng = np.random.default_rng(8)
    wave = np.geomspace(6000.0, 6300.0, N)
    t = velocity_axis(wave)
    template = 1.0 + 0.3 * np.sin(wave / 40.0)
    var = (0.01 * template) ** 2
    cov = (np.outer(template, template) * matern32(t[:, None] - t[None, :], AMP, RHO)
           + np.diag(var))
    y = 2.0 * template + np.linalg.cholesky(cov * 4.0) @ rng.standard_normal(N) / 2.0
    return t, template, var, y


def _cov(theta, template, t, var, keep):
    m = theta * template[keep]
    c = np.outer(m, m) * matern32(t[keep][:, None] - t[keep][None, :], AMP, RHO)
    return m, c + np.diag(var[keep])


def test_psis_loo_matches_brute_force_refits():
    t, template, var, y = _problem()
    thetas = np.linspace(1.5, 2.5, 1501)   # uniform prior; the posterior lies well inside
    brute = np.empty(N)
    for i in range(N):
        keep = np.arange(N) != i
        logpost = np.array([multivariate_normal(*_cov(th, template, t, var, keep)).logpdf(
            y[keep]) for th in thetas])
        w = np.exp(logpost - logsumexp(logpost))
        cond = correlated_loo_pointwise(y, var, thetas[:, None] * template[None, :], t,
                                        np.full(thetas.size, AMP), np.full(thetas.size, RHO))
        brute[i] = logsumexp(cond[:, i], b=w)
    # posterior draws of the full fit (inverse CDF on the same quadrature)
    full = np.array([multivariate_normal(*_cov(th, template, t, var, slice(None))).logpdf(y)
                     for th in thetas])
    cdf = np.cumsum(np.exp(full - full.max()))
    cdf /= cdf[-1]
    draws = np.interp(np.random.default_rng(3).uniform(size=4000), cdf, thetas)
    terms = correlated_loo_pointwise(y, var, draws[:, None] * template[None, :], t,
                                     np.full(draws.size, AMP), np.full(draws.size, RHO))
    data = az.from_dict({"posterior": {"theta": draws.reshape(4, 1000)},
                         "log_likelihood": {"y": terms.reshape(4, 1000, N)}},
                        dims={"y": ["pixel"]})
    res = az.loo(data, pointwise=True, var_name="y")
    psis = np.asarray(res.elpd_i).ravel()
    assert np.max(np.abs(psis - brute)) < 0.02, np.max(np.abs(psis - brute))
    assert abs(psis.sum() - brute.sum()) < 0.05
    assert np.all(np.asarray(res.pareto_k) < 0.7)
    # independent-pixel terms (the mismatch variance on the diagonal only) do not
    # estimate the leave-one-out density of correlated pixels
    m = draws[:, None] * template[None, :]
    naive = -0.5 * (np.log(2 * np.pi * (var + (AMP * m) ** 2)) + (y - m) ** 2
                    / (var + (AMP * m) ** 2))
    naive_elpd = logsumexp(naive, axis=0) - np.log(draws.size)
    assert abs(naive_elpd.sum() - brute.sum()) > 1.0
