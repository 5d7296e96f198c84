"""A scale factor on the quoted measurement errors of spectra."""

from ..priors import Prior
from .base import Param

__all__ = ["PARAMETERS", "active"]

PARAMETERS = (
    Param("jitter", "", "jitter", Prior("fixed", value=1.0), low=0.0, open_low=True,
          why="it scales errors", shared=True,
          words="error scaling (jitter)"),
)


def active(model):
    """Return True: every model variant has the noise parameters."""
    return True
