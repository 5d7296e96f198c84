"""The model-mismatch term of spectra (:mod:`teffmc.likelihood.mismatch`).

Priors: common practice, no source. The amplitude runs from 0.1 % of the model flux (a
grid as good as the data) to 50 % (a band the grid lacks); the correlation length from a
few resolution elements at R ~ 10^4 (a line the grid lacks) to a molecular band's width
(~3 % of the wavelength; longer scales are the calibration polynomial's) -- two decades:
where the data do not constrain it, a wider prior only lengthens the chain. The
independent per-pixel part: errors of single lines and of the line-spread function
decorrelate within a resolution element; without it the one correlation length has to
serve both, sits at the pixel scale and lets band-wide errors through (measured on
cross-model injections, README "Model mismatch").
"""

from ..priors import Prior
from .base import Param

__all__ = ["PARAMETERS", "active"]


def _correlated(model):
    return "correlated" in model.mismatch_terms


PARAMETERS = (
    Param("mismatch_amp", "", r"$\sigma_\mathrm{mis}$", Prior("loguniform", low=1e-3, high=0.5),
          low=0.0, open_low=True, why="an amplitude is positive", shared=True,
          words="mismatch amplitude"),
    Param("mismatch_scale", "km/s", r"$\rho_\mathrm{mis}$ [km/s]",
          Prior("loguniform", low=100.0, high=10000.0), low=0.0, open_low=True,
          why="a correlation length is positive", shared=True, active=_correlated,
          words="mismatch correlation length"),
    Param("mismatch_white", "", r"$\sigma_\mathrm{pix}$", Prior("loguniform", low=1e-4, high=0.3),
          low=0.0, open_low=True, why="an amplitude is positive", shared=True,
          active=_correlated,
          words="independent mismatch amplitude"),
)


def active(model):
    """Return whether any spectrum of the model variant has a model-mismatch term."""
    return bool(model.mismatch_terms)
