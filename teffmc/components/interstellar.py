"""Interstellar extinction: a dust_extinction law scaled by A_V, shaped by R_V.

Acts as a log10 transmission ``-0.4 A_V k(lambda; R_V)`` with ``k = A_lambda / A_V`` of
the model's law, tabulated on each data set's wavelengths (over the R_V prior's range
when R_V is free).
"""

from ..priors import Prior
from .base import Param

__all__ = ["PARAMETERS", "METHODS", "active", "setup", "log10_transmission", "r_v_limits"]


def r_v_limits(model):
    """Return (low, high, why): the calibrated R_V range of the model's extinction law."""
    from ..dust.extinction import law_ranges

    lo, hi = law_ranges(model.extinction_law)[1]
    return lo, hi, f"the R_V range of extinction law {model.extinction_law}"


PARAMETERS = (
    Param("a_v", "mag", r"$A_V$", Prior("uniform", low=0.0, high=10.0), low=0.0,
          why="extinction cannot be negative", shared=True, group="veil",
          words="interstellar extinction A_V", corner_rank=20),
    Param("r_v", "", r"$R_V$", Prior("fixed", value=3.1), limits=r_v_limits, shared=True,
          group="veil", words="R_V", corner_rank=70),
)


#: what the methods text says (a template fragment: teffmc.components, ``METHODS``)
METHODS = ("Interstellar extinction follows the {{ law | e }} law "
           "{{ law_key | cite if law_key else '' }} as implemented in "
           "{{ 'dust_extinction' | e }} {{ 'Gordon2024' | cite }}, with {{ av }} and {{ rv }} "
           "as parameters.")


def active(model):
    """Return True: every model variant has interstellar extinction (A_V may be 0)."""
    return True


def setup(wave, model, r_v_prior):
    """Tabulate the law's curve on ``wave`` [Angstrom] (:class:`teffmc.dust.ExtinctionTable`).

    At the fixed R_V of a fixed prior, else over the prior's R_V support.
    """
    from ..dust.extinction import ExtinctionTable

    if r_v_prior.fixed:
        return ExtinctionTable(model.extinction_law, wave, r_v=r_v_prior.value)
    lo, hi = r_v_prior.support
    return ExtinctionTable(model.extinction_law, wave, r_v_range=(lo, hi))


def log10_transmission(table, p):
    """Return the log10 interstellar transmission, -0.4 A_lambda, shape (n, n_pix)."""
    return -0.4 * p["a_v"][:, None] * table.curve(p["r_v"])
