"""Hot surface spots: a fraction of the disc at a higher effective temperature.

The mirror of the cool patches (:mod:`teffmc.components.patches`): a fraction
``spot_cover`` of the disc has effective temperature ``teff + spot_dteff``, with the
photosphere's log g, [M/H] and grid physics, and the model mixes the surface fluxes by
area (a surface region, :mod:`teffmc.components`). It stands for the bright tops of the
few giant convection cells of a red supergiant, whose hot rising gas makes the disc
patchy (common practice, no source). The disc-averaged ``sigma T^4`` -- the luminosity
and the bolometric flux -- includes them (Stefan-Boltzmann law,
docs/references.md#radiation-laws-and-constants).

Turned on by ``[model] spots = true`` (or ``spots = true`` in a ``[[hypothesis]]``). With
the cool patches on as well, the likelihood refuses walkers whose regions together cover
more than the disc.

Priors: common practice, no source. Bright convective cells are a minority of the disc
(cover uniform 0-0.5) and a few hundred kelvin hotter than the mean (up to 1000 K); the
spot temperature must stay on the grid, which the likelihood checks.
"""

from ..priors import Prior
from .base import Param

__all__ = ["PARAMETERS", "SWITCH", "METHODS", "active", "region"]

PARAMETERS = (
    Param("spot_cover", "", r"$f_\mathrm{spot}$", Prior("uniform", low=0.0, high=0.5),
          low=0.0, high=1.0, why="a covering fraction lies in [0, 1]", group="temperature",
          words="hot-spot fraction", corner_rank=120),
    Param("spot_dteff", "K", r"$\Delta T_\mathrm{spot}$",
          Prior("uniform", low=0.0, high=1000.0), low=0.0,
          why="the spots are hotter than the photosphere", group="temperature",
          words="hot-spot temperature excess", corner_rank=130),
)
#: the ``[model]`` key that turns the spots on
SWITCH = "spots"
#: what the methods text says when they are on
METHODS = ("Hot surface spots are included: a fraction of the disc at a higher effective "
           "temperature, from the same grid, mixed with the photosphere by area.")


def active(model):
    """Return whether the model variant's config turns the hot spots on."""
    return SWITCH in model.switches


def region(p):
    """``(cover, teff)`` of the spots, or None without them."""
    if "spot_cover" not in p:
        return None
    return p["spot_cover"], p["teff"] + p["spot_dteff"]
