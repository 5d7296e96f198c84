"""Nested-sampling evidence against an analytic value."""

import math

import numpy as np
import pytest

from teffmc.evidence import log_evidence
from teffmc.priors import Prior


class _Space:
    """Two uniform priors on [-10, 10], the interface log_evidence needs."""

    priors = [Prior("uniform", low=-10.0, high=10.0)] * 2
    ndim = 2

    def log_prior(self, x):
        return sum(p.logpdf(x[:, i]) for i, p in enumerate(self.priors))


def test_gaussian_likelihood_in_a_box():
    # Z = int N(x; mu, s) / 20^2 dx = 1/400 (the Gaussian lies well inside the box):
    # ln Z = -ln 400 = -5.9915 (analytic, common practice, no source)
    space = _Space()
    mu, s = np.array([1.0, -2.0]), np.array([0.5, 1.5])

    def log_post(x):
        ll = -0.5 * np.sum(((x - mu) / s) ** 2, axis=1) - np.sum(np.log(np.sqrt(2 * np.pi) * s))
        return ll + space.log_prior(x)

    lnz, err, ncall = log_evidence(log_post, space, seed=3, nlive=200)
    assert err > 0 and ncall > 1000
    assert lnz == pytest.approx(-math.log(400.0), abs=max(3 * err, 0.05))
