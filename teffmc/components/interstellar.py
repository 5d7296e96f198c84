"""Interstellar extinction: a dust_extinction law scaled by A_V, shaped by R_V."""

from ..priors import Prior
from .base import Param

__all__ = ["PARAMETERS", "active"]

PARAMETERS = (
    Param("a_v", "mag", r"$A_V$", Prior("uniform", low=0.0, high=10.0), low=0.0,
          why="extinction cannot be negative", shared=True, group="veil"),
    # R_V's limits depend on the law: teffmc.parameters.parameter_limits asks the law
    Param("r_v", "", r"$R_V$", Prior("fixed", value=3.1), shared=True, group="veil"),
)


def active(model):
    return True
