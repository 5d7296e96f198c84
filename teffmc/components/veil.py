"""The circumstellar veil: partial covering by grey or Mie dust, with scattered light.

Acts as a factor on the flux (:meth:`teffmc.dust.Veil.factor`: ``1 - c + c e^-tau`` plus
the scattered light, not a cheap logarithm), with the grain optics tabulated on each data
set's wavelengths.
"""

import numpy as np

from ..priors import Prior
from .base import Param

__all__ = ["PARAMETERS", "METHODS", "METHODS_OFF", "active", "setup", "factor",
           "radius_limits"]


def radius_limits(model):
    """Return (low, high, why): the grain radii [micron] the optics table covers."""
    from ..dust.mietable import RADIUS_RANGE

    return (*RADIUS_RANGE, "the grain radii [micron] of the optics table")


PARAMETERS = (
    Param("veil_tau", "", r"$\tau_\mathrm{veil}$", Prior("uniform", low=0.0, high=5.0),
          low=0.0, why="an optical depth cannot be negative", group="veil",
          words="veil optical depth at 0.55 µm", corner_rank=40),
    Param("veil_cover", "", r"$f_\mathrm{veil}$", Prior("uniform", low=0.0, high=1.0),
          low=0.0, high=1.0, why="a covering fraction lies in [0, 1]", group="veil",
          words="veil covering fraction", corner_rank=60),
    Param("grain_radius", "um", r"$a$ [µm]", Prior("loguniform", low=0.02, high=5.0),
          low=0.0, open_low=True, limits=radius_limits, shared=True, group="veil",
          active=lambda m: m.veil == "mie",
          words="grain radius", corner_rank=50),
    Param("veil_scatter", "", r"$s_\mathrm{veil}$", Prior("uniform", low=0.0, high=1.0),
          low=0.0, high=1.0, why="a scattered-light fraction lies in [0, 1]", shared=True,
          group="veil", active=lambda m: m.veil == "mie" and m.scattering,
          words="scattered-light factor"),
)


#: what the methods text says with a veil, and without (template fragments:
#: teffmc.components, ``METHODS``)
METHODS = (
    "A circumstellar veil covers a fraction of the stellar disc with dust of optical depth "
    "{{ tau }} at 0.55 {{ mu }}m; "
    "{% if model.veil == 'grey' %}it is the same at every wavelength (grey dust), with no "
    "scattered light"
    "{% else %}its wavelength dependence is Mie theory (miepython "
    "{{ versions.get('miepython', '') }}) for {{ model.grain_material | e }} grains with a "
    "log-normal spread of {{ model.grain_spread_dex | g }} dex in radius"
    "{% if model.scattering %}, and light scattered back into the beam within a cone of "
    "{{ model.scatter_cone_deg | g }} degrees is added"
    "{% else %}; scattered light is not added back{% endif %}{% endif %}.")
METHODS_OFF = "No circumstellar veil is included."


def active(model):
    """Return whether the model variant has a veil (grey or Mie, not ``"none"``)."""
    return model.veil != "none"


def setup(wave, model, r_v_prior):
    """Tabulate the veil's optics on ``wave`` [Angstrom] (:class:`teffmc.dust.Veil`)."""
    from ..dust.veil import Veil

    return Veil(model.veil, wave, material=model.grain_material,
                spread_dex=model.grain_spread_dex, scattering=model.scattering,
                scatter_cone_deg=model.scatter_cone_deg)


def factor(veil, p):
    """Transmission of the veil with its scattered light, shape (n, n_pix)."""
    n = p["veil_tau"].shape[0]
    return veil.factor(p["veil_tau"], p["veil_cover"], p.get("grain_radius", np.ones(n)),
                       p.get("veil_scatter", np.zeros(n)))
