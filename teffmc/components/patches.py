"""Cool surface patches: a fraction of the disc at a lower effective temperature.

A surface region (:mod:`teffmc.components`): a fraction ``patch_cover`` of the disc has
effective temperature ``teff - patch_dteff``, with the photosphere's log g, [M/H] and
grid physics; the model mixes the two surface fluxes by area.
"""

from ..priors import Prior
from .base import Param

__all__ = ["PARAMETERS", "METHODS", "active", "region"]

PARAMETERS = (
    Param("patch_cover", "", r"$f_\mathrm{patch}$", Prior("uniform", low=0.0, high=0.9),
          low=0.0, high=1.0, why="a covering fraction lies in [0, 1]", group="temperature",
          words="cool-patch fraction", corner_rank=100),
    Param("patch_dteff", "K", r"$\Delta T_\mathrm{patch}$",
          Prior("uniform", low=0.0, high=1500.0), low=0.0,
          why="the patches are cooler than the photosphere", group="temperature",
          words="cool-patch temperature difference", corner_rank=110),
)
#: after the grid's nuisances in the sampled vector (the layout of earlier runs)
AFTER_NUISANCES = True
#: what the methods text says when they are on
METHODS = ("Cool surface patches are included: a fraction of the disc at a lower effective "
           "temperature, from the same grid, mixed with the photosphere by area.")


def active(model):
    """Return whether the model variant has cool patches (``[model] patches``)."""
    return model.patches


def region(p):
    """``(cover, teff)`` of the patches, or None without them."""
    if "patch_cover" not in p:
        return None
    return p["patch_cover"], p["teff"] - p["patch_dteff"]
