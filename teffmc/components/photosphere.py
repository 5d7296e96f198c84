"""The photosphere: grid interpolation in (Teff, log g, [M/H]) and the angular diameter.

The grid's own nuisance axes (``<name>_scale``) are declared by the grid file
(:mod:`teffmc.photosphere.nuisance`), not here.
"""

from ..priors import Prior
from .base import Param

__all__ = ["PARAMETERS", "active"]


def _axis(axis):
    def prior(model, grid_bounds):  # a grid with one node on an axis fixes that parameter
        lo, hi = grid_bounds[axis]
        return Prior("uniform", low=lo, high=hi) if hi > lo else Prior("fixed", value=lo)
    return prior


PARAMETERS = (
    Param("teff", "K", r"$T_\mathrm{eff}$ [K]", _axis("teff"), group="temperature",
          words="effective temperature", corner_rank=10),
    Param("logg", "dex", r"$\log g$", _axis("logg"), shared=True, group="temperature",
          words="surface gravity", corner_rank=80),
    Param("mh", "dex", "[M/H]", _axis("mh"), shared=True, group="temperature",
          words="metallicity", corner_rank=90),
    Param("theta", "mas", r"$\theta$ [mas]", Prior("loguniform", low=1e-3, high=1e3),
          low=0.0, open_low=True, why="an angular diameter is positive", group="radius",
          words="angular diameter", corner_rank=30),
)


def active(model):
    """Return True: every model variant has a photosphere."""
    return True
