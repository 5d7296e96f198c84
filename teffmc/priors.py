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

    @property
    def fixed(self):
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
                a, b = ((self.low - self.mean) / self.sd, (self.high - self.mean) / self.sd)
                lp = lp - math.log(special.ndtr(b) - special.ndtr(a))
        return np.where(inside, lp, -np.inf)

    def ppf(self, u):
        """Inverse cumulative distribution: maps uniform u in (0, 1) to the prior."""
        u = np.asarray(u, float)
        if self.kind == "uniform":
            return self.low + u * (self.high - self.low)
        if self.kind == "loguniform":
            return self.low * (self.high / self.low) ** u
        if self.kind == "normal":
            return self.mean + self.sd * special.ndtri(u)
        a, b = special.ndtr((self.low - self.mean) / self.sd), special.ndtr(
            (self.high - self.mean) / self.sd)
        return self.mean + self.sd * special.ndtri(a + u * (b - a))

    def sample(self, rng, n):
        return self.ppf(rng.uniform(0.0, 1.0, n))

    def to_dict(self):
        if self.fixed:
            return {"fixed": self.value}
        return {"dist": self.kind, **{k: getattr(self, k) for k in PRIOR_KINDS[self.kind]}}
