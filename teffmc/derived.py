"""Derived quantities computed on every posterior draw.

Notes
-----
Angular diameter ``theta`` and distance ``d`` give the radius ``R = theta/2 * d``;
the luminosity is ``L = 4 pi R^2 sigma Teff^4`` and the bolometric flux at Earth
(before extinction) ``f_bol = (theta/2)^2 sigma Teff^4`` (Stefan-Boltzmann law).
With surface regions (cool patches, ...) the luminosity uses the disc-averaged
``sigma T^4`` (:func:`teffmc.components.mean_t4`).
"""

import numpy as np

from .components import mean_t4
from .model import MAS_TO_RAD

__all__ = ["SIGMA_SB", "PC_M", "R_SUN_M", "L_SUN_W", "luminosity", "bolometric"]

SIGMA_SB = 5.670374419e-8     # W m^-2 K^-4, CODATA 2018
PC_M = 3.0856775814913673e16  # m, IAU 2015 Resolution B2
R_SUN_M = 6.957e8             # m, IAU 2015 Resolution B3 nominal solar radius
L_SUN_W = 3.828e26            # W, IAU 2015 Resolution B3 nominal solar luminosity


def luminosity(radius_m, t4):
    """L = 4 pi R^2 sigma T^4 [W]."""
    return 4.0 * np.pi * radius_m**2 * SIGMA_SB * t4


def bolometric(p, distance_pc=None):
    """``{name: array}``: f_bol [W m^-2], and R [R_sun], L [L_sun] when a distance is given."""
    t4 = mean_t4(p)
    half = 0.5 * p["theta"] * MAS_TO_RAD
    out = {"f_bol": half**2 * SIGMA_SB * t4}
    if distance_pc is not None:
        r_m = half * distance_pc * PC_M
        out["radius"] = r_m / R_SUN_M
        out["luminosity"] = luminosity(r_m, t4) / L_SUN_W
    return out
