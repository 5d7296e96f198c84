"""The model-mismatch likelihood against dense linear algebra.

References: the Matern-3/2 kernel (Rasmussen & Williams 2006, eq. 4.17, from memory);
the leave-one-out conditionals of a multivariate normal, log p(y_i | y_-i) =
-1/2 log(2 pi / Q_ii) - 1/2 g_i^2 / Q_ii with Q = C^-1 and g = Q (y - mu) (Burkner,
Gabry & Vehtari 2021, Comput. Stat. 36, 1243, their eq. 9-10, from memory); the dense
reference is scipy.stats.multivariate_normal.
"""

import numpy as np
import pytest
from scipy.stats import multivariate_normal

from teffmc.likelihood.mismatch import correlated_loglike_parts, matern32, velocity_axis
from teffmc.likelihood.mismatch_loo import correlated_loo_pointwise
from teffmc.observe.calibration import marginal_loglike


def correlated_loglike(d, var, m, t, amp, rho, design, prior_sigma):
    """The filter with a plain variance per pixel (no jitter, no relative parts)."""
    return correlated_loglike_parts(d, var, m, t, amp, rho, 1.0, 0.0, 0.0, design,
                                    prior_sigma)


def _problem(n=150, seed=3):
    rng = np.random.default_rng(seed)
    wave = np.sort(rng.uniform(5000.0, 7000.0, n))   # uneven pixels, gaps included
    t = velocity_axis(wave)
    nw = 4
    m = rng.uniform(0.5, 2.0, (nw, n))
    d = rng.uniform(0.5, 2.0, n)
    var = rng.uniform(1e-4, 1e-2, n)
    amp = np.array([0.05, 0.002, 0.3, 0.1])
    rho = np.array([300.0, 30.0, 20000.0, 3000.0])
    design = np.polynomial.legendre.legvander(np.linspace(-1, 1, n), 2).T
    return t, d, var, m, amp, rho, design


def _dense_cov(t, m, var, amp, rho, design, sigma):
    cov = np.outer(m, m) * matern32(t[:, None] - t[None, :], amp, rho) + np.diag(var)
    if design is not None:
        b = m[:, None] * design.T
        cov = cov + sigma**2 * b @ b.T
    return cov


@pytest.mark.parametrize("with_poly", [False, True])
def test_loglike_equals_dense_normal(with_poly):
    t, d, var, m, amp, rho, design = _problem()
    design = design if with_poly else None
    ll = correlated_loglike(d, var, m, t, amp, rho, design, 0.2)
    for w in range(m.shape[0]):
        cov = _dense_cov(t, m[w], var, amp[w], rho[w], design, 0.2)
        ref = multivariate_normal(m[w], cov).logpdf(d)
        assert ll[w] == pytest.approx(ref, abs=1e-8 * abs(ref) + 1e-8)


@pytest.mark.parametrize("with_poly", [False, True])
def test_loo_terms_equal_dense_conditionals(with_poly):
    t, d, var, m, amp, rho, design = _problem(n=90, seed=5)
    design = design if with_poly else None
    loo = correlated_loo_pointwise(d, var, m, t, amp, rho, design, 0.2)
    for w in range(m.shape[0]):
        q = np.linalg.inv(_dense_cov(t, m[w], var, amp[w], rho[w], design, 0.2))
        g = q @ (d - m[w])
        ref = -0.5 * np.log(2 * np.pi / np.diag(q)) - 0.5 * g**2 / np.diag(q)
        np.testing.assert_allclose(loo[w], ref, rtol=1e-8, atol=1e-8)


@pytest.mark.parametrize("log_uniform", [False, True])
@pytest.mark.parametrize("with_poly", [False, True])
def test_fused_filter_equals_dense_normal(with_poly, log_uniform):
    """The fast filter (variance by parts, one exp per distinct pixel step) gives the
    dense multivariate normal's value, on uneven and on log-uniform pixels."""
    t, d, _, m, amp, rho, design = _problem()
    if log_uniform:
        t = velocity_axis(np.exp(np.linspace(np.log(5000.0), np.log(7000.0), t.size)))
    design = design if with_poly else None
    rng = np.random.default_rng(8)
    err2 = rng.uniform(1e-4, 1e-2, t.size)
    jit2 = rng.uniform(0.5, 2.0, m.shape[0])
    rel_pix = rng.uniform(0.0, 1e-4, t.size)
    rel_walk = rng.uniform(0.0, 1e-3, m.shape[0])
    ll = correlated_loglike_parts(d, err2, m, t, amp, rho, jit2, rel_pix, rel_walk, design,
                                  0.2)
    for w in range(m.shape[0]):
        var = jit2[w] * err2 + (rel_pix + rel_walk[w]) * m[w] ** 2
        cov = _dense_cov(t, m[w], var, amp[w], rho[w], design, 0.2)
        ref = multivariate_normal(m[w], cov).logpdf(d)
        assert ll[w] == pytest.approx(ref, abs=1e-8 * abs(ref) + 1e-8)


def test_tiny_amplitude_gives_the_independent_likelihood():
    """amp -> 0: the correlated term vanishes and the calibration marginal is recovered."""
    t, d, var, m, _, rho, design = _problem()
    amp = np.full(m.shape[0], 1e-9)
    ll = correlated_loglike(d, var, m, t, amp, rho, design, 0.2)
    ref = marginal_loglike(d, np.broadcast_to(var, m.shape), m, design.T, 0.2)
    np.testing.assert_allclose(ll, ref, rtol=1e-9)


def test_matern32_kernel_values():
    """k(0) = amp^2; k(rho) = amp^2 (1 + sqrt3) e^-sqrt3 = 0.4834 amp^2 (R&W eq. 4.17)."""
    assert matern32(0.0, 2.0, 5.0) == pytest.approx(4.0)
    assert matern32(5.0, 1.0, 5.0) == pytest.approx((1 + np.sqrt(3)) * np.exp(-np.sqrt(3)))
    assert matern32(5.0, 1.0, 5.0) == pytest.approx(0.48335, abs=1e-5)
