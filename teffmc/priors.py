"""Prior distributions for one parameter, vectorised over walkers."""

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

__all__ = ["Prior", "PRIOR_KINDS"]

#: prior kind -> the numbers it needs (config keys)
PRIOR_KINDS = {
    "uniform": ("low", "high"),
    "loguniform": ("low", "high"),
    "normal": ("mean", "sd"),
    "truncnormal": ("mean", "sd", "low", "high"),
}


@dataclass(frozen=True)
class Prior:
    """One prior: ``uniform``, ``loguniform``, ``normal``, ``truncnormal`` or ``fixed``."""

    kind: str
    low: float = -math.inf
    high: float = math.inf
    mean: float = 0.0
    sd: float = 1.0
    value: float = math.nan

    def __post_init__(self):
        if self.kind == "fixed":
            if not math.isfinite(self.value):
                raise ValueError(f"fixed value should be finite but got {self.value}")
            return
        if self.kind not in PRIOR_KINDS:
            raise ValueError(f"prior kind should be one of {', '.join(PRIOR_KINDS)} "
                             f"but got {self.kind!r}")
        if self.kind in ("uniform", "loguniform", "truncnormal") and not self.low < self.high:
            raise ValueError(f"low should be < high but got low={self.low}, high={self.high}")
        if self.kind == "loguniform" and self.low <= 0:
            raise ValueError(f"loguniform low should be > 0 but got {self.low}")
        if self.kind in ("normal", "truncnormal") and self.sd <= 0:
            raise ValueError(f"sd should be > 0 but got {self.sd}")
        if self.kind == "truncnormal" and not math.isfinite(_log_mass(*self._ab())):
            raise ValueError(f"[low, high] = [{self.low:g}, {self.high:g}] lies so far from "
                             f"mean {self.mean:g} (sd {self.sd:g}) that its probability "
                             "underflows; give a mean nearer the bounds")

    @property
    def fixed(self):
        """Return whether the prior is a fixed value (the parameter is not sampled)."""
        return self.kind == "fixed"

    @property
    def support(self):
        """(low, high) of the prior's support."""
        if self.fixed:
            return (self.value, self.value)
        if self.kind == "normal":
            return (-math.inf, math.inf)
        return (self.low, self.high)

    def logpdf(self, x):
        """Log prior density (normalised), -inf outside the support."""
        x = np.asarray(x, float)
        lo, hi = self.support
        inside = (x >= lo) & (x <= hi)
        if self.kind == "uniform":
            lp = np.full(x.shape, -math.log(self.high - self.low))
        elif self.kind == "loguniform":
            lp = -np.log(np.where(inside, x, 1.0)) - math.log(math.log(self.high / self.low))
        else:
            z = (x - self.mean) / self.sd
            lp = -0.5 * z**2 - math.log(self.sd * math.sqrt(2 * math.pi))
            if self.kind == "truncnormal":
                lp = lp - _log_mass(*self._ab())
        return np.where(inside, lp, -np.inf)

    def _ab(self):
        """Return a truncnormal's bounds in standard deviations from the mean."""
        return (self.low - self.mean) / self.sd, (self.high - self.mean) / self.sd

    def ppf(self, u):
        """Inverse cumulative distribution: maps uniform u in (0, 1) to the prior."""
        u = np.asarray(u, float)
        if self.kind == "uniform":
            return self.low + u * (self.high - self.low)
        if self.kind == "loguniform":
            return self.low * (self.high / self.low) ** u
        if self.kind == "normal":
            return self.mean + self.sd * special.ndtri(u)
        a, b = self._ab()
        if a > 0:  # [a, b] above the mean, Phi(a) ~ 1: invert the mirror image, -z in [-b, -a]
            z = -_ppf_left(1.0 - u, -b, -a)
        else:
            z = _ppf_left(u, a, b)
        return np.clip(self.mean + self.sd * z, self.low, self.high)

    def sample(self, rng, n):
        """Draw ``n`` values with ``rng`` (through :meth:`ppf`), shape (n,)."""
        return self.ppf(rng.uniform(0.0, 1.0, n))

    def to_dict(self):
        """Return the prior as run.toml writes it: ``{"fixed": v}`` or ``{"dist": kind, ...}``."""
        if self.fixed:
            return {"fixed": self.value}
        return {"dist": self.kind, **{k: getattr(self, k) for k in PRIOR_KINDS[self.kind]}}


def _log_mass(a, b):
    """ln(Phi(b) - Phi(a)) of the standard normal, a < b, also far in either tail."""
    if a + b > 0:
        a, b = -b, -a   # the same mass mirrored, so both ends lie at or below the centre
    la, lb = special.log_ndtr(a), special.log_ndtr(b)
    if lb == -np.inf:  # underflows even in logarithms (b ~ -1e154): no usable mass
        return -math.inf
    return float(lb + np.log(-np.expm1(la - lb)))


def _ppf_left(u, a, b):
    """Inverse CDF of the standard normal truncated to [a, b] with a <= 0.

    Phi(a) + u (Phi(b) - Phi(a)) is formed in logarithms and inverted by ``ndtri_exp``,
    so it stays exact where Phi underflows (a = -60: Phi(a) ~ 1e-785); the same
    construction as scipy.stats.truncnorm (tests/test_bad_inputs_more.py compares them).
    """
    la = special.log_ndtr(a)
    with np.errstate(divide="ignore"):  # u = 0 gives ln u = -inf, i.e. z = a
        lp = np.logaddexp(la, np.log(u) + _log_mass(a, b))
    return special.ndtri_exp(np.minimum(lp, 0.0))
