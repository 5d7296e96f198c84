"""Model components and the parameters each declares: the one place a parameter is named.

Every component file declares its parameters (:class:`Param`: name, unit, label, physical
limits, default prior, whether epochs share it by default, its dimming-budget group) and
when a model variant has them (``active(model)``). The parameter tables the rest of the
package reads -- names, units, labels, limits, default priors and sharing, budget groups
-- are built here from those declarations. Adding a component is one file plus one line
in :data:`COMPONENTS`.

The forward-model arithmetic of each component still lives in :mod:`teffmc.model`.
"""

from . import interstellar, mismatch, noise, patches, photosphere, veil
from .base import Param

__all__ = ["COMPONENTS", "Param", "all_parameters", "declared", "active_parameters"]

#: the registry, in the order parameters appear in a fit
COMPONENTS = (photosphere, interstellar, noise, veil, patches, mismatch)


def all_parameters():
    """Every declared parameter, ``{name: Param}`` in registry order."""
    return {p.name: p for c in COMPONENTS for p in c.PARAMETERS}


def declared(name):
    """The :class:`Param` called ``name`` (KeyError if none)."""
    return all_parameters()[name]


def active_parameters(model):
    """``{name: Param}`` of the parameters a model variant has (nuisances aside)."""
    return {p.name: p for c in COMPONENTS if c.active(model) for p in c.PARAMETERS
            if p.active is None or p.active(model)}
