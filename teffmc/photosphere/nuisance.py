r"""Grid-physics nuisance axes: how a grid's spectra respond to its most uncertain physics.

A grid is computed with one choice of uncertain inputs (for the built-in grid: the TiO
band strengths and the statistical atomic line haze). Fitting with that choice alone
makes Teff's interval pretend the inputs are exact. A nuisance axis stores the whole
grid recomputed with one input scaled by e^{-h} and e^{+h} (``minus``, ``plus``); with
x = ln(scale) the log flux of every node is the quadratic through the three models,

    log F(x) = log F_0 + x D1 + x^2 / 2 D2,
    D1 = (F_+ - F_-) / (2h),   D2 = (F_+ - 2 F_0 + F_-) / h^2      (log10 fluxes),

exact at x = 0 and x = +-h; it is interpolated between nodes like the flux itself. The
scale factor is sampled as the parameter ``<name>_scale`` with a log-uniform prior over
[``low``, ``high``] (kept within e^{+-h}, where the quadratic is an interpolation).
Responses are formed *after* the per-run convolution to the data's pixels, so they are
exact for the convolved spectra too.
"""

import hashlib
from dataclasses import dataclass

import numpy as np

from ..errors import GridError

__all__ = ["NuisanceAxis", "nuisance_checksum", "responses"]


@dataclass(frozen=True, eq=False)
class NuisanceAxis:
    """One uncertain input of a grid, as the grid recomputed at e^{-h} and e^{+h}.

    Parameters
    ----------
    name : str
        Short name; the sampled parameter is ``<name>_scale``.
    step : float
        h, the step in ln(scale) of the ``minus`` and ``plus`` grids.
    minus, plus : ndarray
        log10 surface flux, the grid's shape, with the input scaled by e^{-h} and e^{+h};
        NaN where that model is missing (its node then has no response).
    low, high : float
        Default prior range of the scale factor (log-uniform), within [e^-h, e^h].
    note : str
        What the input is and where its range comes from.
    """

    name: str
    step: float
    minus: np.ndarray
    plus: np.ndarray
    low: float
    high: float
    note: str = ""

    def __post_init__(self):
        if not self.name.isidentifier():
            raise GridError(f"nuisance name should be a simple name but got {self.name!r}")
        if not (self.step > 0 and np.isfinite(self.step)):
            raise GridError(f"nuisance {self.name}: step should be > 0 but got {self.step}")
        lim = np.exp(self.step) * (1 + 1e-9)
        if not (1.0 / lim <= self.low < self.high <= lim):
            raise GridError(f"nuisance {self.name}: prior range [{self.low}, {self.high}] "
                            f"should lie inside [e^-h, e^h] = [{1 / lim:.4g}, {lim:.4g}]")

    @property
    def parameter(self):
        """Return the name of the sampled scale parameter, ``"<name>_scale"``."""
        return f"{self.name}_scale"


def responses(base, axis):
    """First and second derivatives of log10 flux in ln(scale), (D1, D2), base's shape.

    Nodes where the base or a perturbed model is missing get zero response.
    """
    h = axis.step
    ok = np.isfinite(base) & np.isfinite(axis.minus) & np.isfinite(axis.plus)
    mi = np.where(ok, axis.minus, 0.0)
    pl = np.where(ok, axis.plus, 0.0)
    b = np.where(ok, base, 0.0)
    d1 = (pl - mi) / (2.0 * h)
    d2 = (pl - 2.0 * b + mi) / (h * h)
    return d1, d2


def nuisance_checksum(axes):
    """SHA-256 over every nuisance axis (name, step, range, cubes as little-endian float32)."""
    h = hashlib.sha256()
    for a in axes:
        h.update(f"{a.name}|{float(a.step):.17g}|{float(a.low):.17g}|{float(a.high):.17g}"
                 .encode())
        for cube in (a.minus, a.plus):
            h.update(np.ascontiguousarray(cube, dtype="<f4").tobytes())
    return h.hexdigest()
