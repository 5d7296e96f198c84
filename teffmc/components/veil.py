"""The circumstellar veil: partial covering by grey or Mie dust, with scattered light."""

from ..priors import Prior
from .base import Param

__all__ = ["PARAMETERS", "active"]

PARAMETERS = (
    Param("veil_tau", "", r"$\tau_\mathrm{veil}$", Prior("uniform", low=0.0, high=5.0),
          low=0.0, why="an optical depth cannot be negative", group="veil"),
    Param("veil_cover", "", r"$f_\mathrm{veil}$", Prior("uniform", low=0.0, high=1.0),
          low=0.0, high=1.0, why="a covering fraction lies in [0, 1]", group="veil"),
    # the radius's limits are the optics table's: teffmc.parameters.parameter_limits
    Param("grain_radius", "um", r"$a$ [µm]", Prior("loguniform", low=0.02, high=5.0),
          low=0.0, open_low=True, shared=True, group="veil",
          active=lambda m: m.veil == "mie"),
    Param("veil_scatter", "", r"$s_\mathrm{veil}$", Prior("uniform", low=0.0, high=1.0),
          low=0.0, high=1.0, why="a scattered-light fraction lies in [0, 1]", shared=True,
          group="veil", active=lambda m: m.veil == "mie" and m.scattering),
)


def active(model):
    return model.veil != "none"
