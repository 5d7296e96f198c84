"""Cool surface patches: a fraction of the disc at a lower effective temperature."""

from ..priors import Prior
from .base import Param

__all__ = ["PARAMETERS", "active"]

PARAMETERS = (
    Param("patch_cover", "", r"$f_\mathrm{patch}$", Prior("uniform", low=0.0, high=0.9),
          low=0.0, high=1.0, why="a covering fraction lies in [0, 1]", group="temperature"),
    Param("patch_dteff", "K", r"$\Delta T_\mathrm{patch}$",
          Prior("uniform", low=0.0, high=1500.0), low=0.0,
          why="the patches are cooler than the photosphere", group="temperature"),
)


def active(model):
    return model.patches
