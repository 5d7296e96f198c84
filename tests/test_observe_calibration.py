"""Analytic marginalisation over the flux-calibration polynomial; Student-t."""

import numpy as np
import pytest
from scipy import integrate, stats

from teffmc.errors import ConfigError
from teffmc.observe import (
    calibration_mean,
    legendre_design,
    marginal_loglike,
    posterior_calibration,
    student_t_loglike,
)


@pytest.fixture
def problem():
    rng = np.random.default_rng(42)
    n = 7
    wave = np.linspace(5000.0, 7000.0, n)
    model = rng.uniform(0.8, 1.2, size=(3, n))
    var = rng.uniform(0.002, 0.01, size=n)
    data = model[0] * (1.0 + 0.05 - 0.03 * np.linspace(-1, 1, n)) + rng.normal(0, 0.05, n)
    return wave, data, var, model


def _log_integrand(c, data, var, model, design, sigma):
    # Gaussian likelihood times Gaussian prior, written out (scipy.stats is slow in dblquad)
    pred = model * (1.0 + design @ c)
    like = -0.5 * np.sum((data - pred) ** 2 / var + np.log(2 * np.pi * var))
    return like - 0.5 * np.sum((c / sigma) ** 2 + np.log(2 * np.pi * sigma**2))


def test_order0_equals_quad(problem):
    wave, data, var, model = problem
    design, sigma = legendre_design(wave, 0), np.array([0.1])
    post = posterior_calibration(data, var, model[0], design, sigma)
    centre, sd = post.mean[0], np.sqrt(post.cov[0, 0])  # only to place the integration range
    peak = _log_integrand(np.array([centre]), data, var, model[0], design, sigma)
    value, _ = integrate.quad(
        lambda c: np.exp(_log_integrand(np.array([c]), data, var, model[0], design, sigma) - peak),
        centre - 20 * sd,
        centre + 20 * sd,
        epsabs=0,
        epsrel=1e-12,
        limit=200,
    )
    expected = peak + np.log(value)
    assert marginal_loglike(data, var, model[0], design, sigma) == pytest.approx(expected, abs=1e-6)


def test_order1_equals_dblquad(problem):
    wave, data, var, model = problem
    design, sigma = legendre_design(wave, 1), np.array([0.1, 0.05])
    post = posterior_calibration(data, var, model[1], design, sigma)
    mu, sd = post.mean, np.sqrt(np.diag(post.cov))
    peak = _log_integrand(mu, data, var, model[1], design, sigma)
    value, _ = integrate.dblquad(
        lambda c1, c0: np.exp(
            _log_integrand(np.array([c0, c1]), data, var, model[1], design, sigma) - peak
        ),
        mu[0] - 15 * sd[0],
        mu[0] + 15 * sd[0],
        mu[1] - 15 * sd[1],
        mu[1] + 15 * sd[1],
        epsabs=1e-14,
        epsrel=1e-11,
    )
    expected = peak + np.log(value)
    assert marginal_loglike(data, var, model[1], design, sigma) == pytest.approx(expected, abs=1e-6)


def test_equals_dense_gaussian_per_walker_variance(problem):
    wave, data, var, model = problem
    design, sigma = legendre_design(wave, 3), np.array([0.2, 0.1, 0.05, 0.02])
    var_w = var * np.array([[1.0], [1.5], [3.0]])  # a jitter term: variance per walker
    got = marginal_loglike(data, var_w, model, design, sigma)
    assert got.shape == (3,)
    for w in range(3):
        B = model[w][:, None] * design
        cov = np.diag(var_w[w]) + B @ np.diag(sigma**2) @ B.T
        expected = stats.multivariate_normal(mean=model[w], cov=cov).logpdf(data)
        assert got[w] == pytest.approx(expected, abs=1e-9)


@pytest.mark.parametrize("n", [7, 29])
def test_fused_pass_equals_dense_gaussian(n):
    """marginal_loglike_fast (one compiled pass, log det S from products of 8 pixels) gives
    the dense multivariate normal's value, with variances of tiny flux units."""
    from teffmc.observe.calibration import marginal_loglike_fast

    rng = np.random.default_rng(n)
    wave = np.linspace(5000.0, 7000.0, n)
    model = 1e-12 * rng.uniform(0.8, 1.2, size=(3, n))
    var = 1e-24 * rng.uniform(0.002, 0.01, size=(3, n))
    data = model[0] * (1.0 + 0.05 - 0.03 * np.linspace(-1, 1, n)) + 1e-12 * rng.normal(0, 0.05, n)
    design, sigma = legendre_design(wave, 2), np.array([0.2, 0.1, 0.05])
    got = marginal_loglike_fast(data, var, model, design.T, sigma)
    for w in range(3):
        B = model[w][:, None] * design
        cov = np.diag(var[w]) + B @ np.diag(sigma**2) @ B.T
        expected = stats.multivariate_normal(mean=model[w], cov=cov).logpdf(data)
        assert got[w] == pytest.approx(expected, rel=1e-10, abs=1e-8)
    np.testing.assert_allclose(got, marginal_loglike(data, var, model, design, sigma),
                               rtol=1e-12, atol=1e-8)


def test_posterior_recovers_known_polynomial():
    wave = np.linspace(4000.0, 9000.0, 2000)
    design = legendre_design(wave, 2)
    c_true = np.array([0.08, -0.05, 0.02])
    model = 1e-13 * (wave / 5000.0) ** -2
    data = model * (1.0 + design @ c_true)
    var = (1e-4 * model) ** 2
    post = posterior_calibration(data, var, model[None], design, 1.0)
    np.testing.assert_allclose(post.mean[0], c_true, atol=1e-6)
    np.testing.assert_allclose(post.poly[0], 1.0 + design @ c_true, atol=1e-6)


def test_design_is_legendre_on_unit_interval():
    design = legendre_design(np.array([1000.0, 1500.0, 3000.0]), 2)
    x = np.array([-1.0, -0.5, 1.0])
    np.testing.assert_allclose(design, np.stack([np.ones(3), x, 0.5 * (3 * x**2 - 1)], axis=1))


def test_student_t_matches_scipy(problem):
    _, data, var, model = problem
    got = student_t_loglike(data, var, model, 4.0)
    expected = stats.t.logpdf(data - model, df=4.0, scale=np.sqrt(var)).sum(axis=1)
    np.testing.assert_allclose(got, expected, rtol=1e-12)


def test_bad_prior_and_nu(problem):
    wave, data, var, model = problem
    with pytest.raises(ConfigError, match="prior_sigma.*> 0 but got 0"):
        marginal_loglike(data, var, model, legendre_design(wave, 1), [0.1, 0.0])
    with pytest.raises(ConfigError, match="student_nu"):
        student_t_loglike(data, var, model, -1.0)


def test_design_transpose_and_calibration_mean(problem):
    wave, data, var, model = problem
    design, sigma = legendre_design(wave, 2), np.array([0.1, 0.05, 0.02])
    np.testing.assert_allclose(
        marginal_loglike(data, var, model, design.T, sigma),
        marginal_loglike(data, var, model, design, sigma),
        rtol=1e-14,
    )
    post = posterior_calibration(data, var, model, design, sigma)
    np.testing.assert_allclose(
        calibration_mean(data, var, model, design.T, sigma), post.mean @ design.T, atol=1e-15
    )
