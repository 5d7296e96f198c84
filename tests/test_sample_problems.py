"""Known target distributions shared by the sampler tests (and checks of the targets).

The resume test's child process imports this module by path, so it depends on numpy only.
"""

import numpy as np

BOX = 20.0  # prior half-width in standard deviations: truncation is negligible


class Gaussian:
    """A correlated Gaussian target inside a flat box prior of +-BOX standard deviations.

    Parameters
    ----------
    mean : array_like, shape (ndim,)
    cov : array_like, shape (ndim, ndim)
    """

    def __init__(self, mean, cov):
        self.mean = np.asarray(mean, dtype=float)
        self.cov = np.asarray(cov, dtype=float)
        self.sd = np.sqrt(np.diag(self.cov))
        self.icov = np.linalg.inv(self.cov)
        self.ndim = self.mean.size
        self.names = [f"p{i}" for i in range(self.ndim)]

    def log_prob(self, x):
        """Return the log-density (unnormalised), ``-inf`` outside the box; x is (n, ndim)."""
        d = np.atleast_2d(x) - self.mean
        inside = np.all(np.abs(d) < BOX * self.sd, axis=1)
        value = -0.5 * np.einsum("ij,jk,ik->i", d, self.icov, d)
        return np.where(inside, value, -np.inf)

    def sample_prior(self, rng, n):
        """Draw ``n`` points from the box prior."""
        return self.mean + rng.uniform(-BOX, BOX, (n, self.ndim)) * self.sd


def correlated_gaussian_5d():
    """5-D Gaussian, scales 1 to 1000, correlation 0.9^|i-j| (0.66-0.9; invented)."""
    sd = np.logspace(0, 3, 5)
    i = np.arange(5)
    corr = 0.9 ** np.abs(i[:, None] - i[None, :])
    return Gaussian(np.array([3600.0, 0.5, -0.2, 12.0, 150.0]), corr * np.outer(sd, sd))


def gaussian_2d():
    """2-D Gaussian, correlation 0.8, Teff-like and A_V-like scales (invented)."""
    sd = np.array([50.0, 0.1])
    corr = np.array([[1.0, 0.8], [0.8, 1.0]])
    return Gaussian(np.array([3600.0, 0.8]), corr * np.outer(sd, sd))


def test_gaussian_targets_are_valid():
    """Covariances are positive definite; the density peaks at the mean; -inf off the box."""
    for target in (correlated_gaussian_5d(), gaussian_2d()):
        assert np.all(np.linalg.eigvalsh(target.cov) > 0)
        x = target.mean + np.vstack([np.zeros(target.ndim), 0.1 * target.sd,
                                     (BOX + 1) * target.sd])
        lp = target.log_prob(x)
        assert lp[0] == 0.0 and lp[1] < 0.0 and lp[2] == -np.inf


def test_5d_gaussian_is_strongly_correlated():
    """The 5-D target is hard enough to matter: every correlation is >= 0.5."""
    g = correlated_gaussian_5d()
    corr = g.cov / np.outer(g.sd, g.sd)
    off = corr[~np.eye(5, dtype=bool)]
    assert off.min() >= 0.5 and off.max() < 1.0
