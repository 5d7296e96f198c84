"""Model components: the one place each parameter is named and each term is evaluated.

A component is one module listed in :data:`COMPONENTS`. It declares

``PARAMETERS``
    its parameters (:class:`Param`: name, unit, label, physical limits -- fixed, or a
    function of the model variant --, default prior, whether epochs share it by
    default, its dimming-budget group);
``active(model)``
    whether a model variant has it;
``SWITCH`` (optional)
    the name of a boolean key of ``[model]`` and ``[[hypothesis]]`` that turns it on: the
    config reads every declared switch into ``ModelSpec.switches`` and ``active`` tests
    ``SWITCH in model.switches``;
``METHODS``, ``METHODS_OFF`` (optional)
    what the methods text (:mod:`teffmc.report.methods`) says about it when a run's
    model has it, and when it has not: a jinja2 fragment rendered with the text's own
    context and filters (``model``: the recorded ModelSpec as a dict, ``versions``,
    symbols such as ``tau`` and ``mu``, filters ``e``, ``g``, ``cite``), so a plain
    sentence with no LaTeX or Markdown special characters is a valid one;
``AFTER_NUISANCES`` (optional, True)
    its parameters come after the grid's nuisance parameters in the sampled vector (the
    layout of runs made before the components were declared);

and, for the components that act on the model flux, one of two seams, composed
generically by :func:`teffmc.model.observed_flux` in registry order:

``region(p) -> (cover, teff) | None``
    a part of the stellar surface: a fraction ``cover`` (n,) of the disc at effective
    temperature ``teff`` (n,), same log g, [M/H] and grid physics as the photosphere.
    None when ``p`` lacks its parameters (they are in ``p`` exactly when the model
    variant has the component). The model mixes the surface fluxes by area,
    ``(1 - sum cover) F(Teff) + sum cover F(teff)``; the derived luminosity averages
    ``T^4`` the same way (:func:`mean_t4`), and the likelihood refuses walkers whose
    regions leave the grid or cover more than the whole disc (:func:`regions`).
``setup(wave, model, r_v_prior) -> state``
    tables on one wavelength set [Angstrom], made once per data set ("channel") when
    ``active(model)``, and then either
    ``log10_transmission(state, p) -> (n, n_pix)``, added to the log10 flux before the
    one exponential of a call, or ``factor(state, p) -> (n, n_pix)``, multiplying the
    flux after it (a transmission that is no cheap logarithm, e.g. a partial cover with
    scattered light).

The photosphere itself is the grid interpolation and the angular-diameter scale of
:mod:`teffmc.model`; components without a seam (noise, mismatch) act in the likelihood.
The parameter tables the rest of the package reads -- names, units, labels, limits,
default priors and sharing, budget groups, config switches -- are built here from the
declarations. Adding a component is one file plus its name in :data:`REGISTRY`.
"""

from importlib import import_module

from .base import Param

__all__ = ["REGISTRY", "COMPONENTS", "Param", "all_parameters", "declared", "active_parameters",
           "SURFACE", "SWITCHES", "regions", "mean_t4"]

#: the registry: the component modules of this package, in the order their parameters
#: appear in a fit. Adding a component is its file plus its name here.
REGISTRY = ("photosphere", "interstellar", "noise", "veil", "patches", "mismatch", "spots")
COMPONENTS = tuple(import_module(f"{__name__}.{name}") for name in REGISTRY)

#: the components that are a part of the stellar surface (``region``), registry order
SURFACE = tuple(c for c in COMPONENTS if hasattr(c, "region"))
#: the declared ``[model]`` switches, ``{key: component}``
SWITCHES = {c.SWITCH: c for c in COMPONENTS if getattr(c, "SWITCH", None)}


def all_parameters():
    """Every declared parameter, ``{name: Param}`` in registry order."""
    return {p.name: p for c in COMPONENTS for p in c.PARAMETERS}


def declared(name):
    """Return the :class:`Param` called ``name`` (KeyError if none)."""
    return all_parameters()[name]


def active_parameters(model):
    """``{name: Param}`` of the parameters a model variant has (nuisances aside)."""
    return {p.name: p for c in COMPONENTS if c.active(model) for p in c.PARAMETERS
            if p.active is None or p.active(model)}


def regions(p):
    """``[(cover, teff), ...]`` of the surface regions whose parameters are in ``p``."""
    out = []
    for c in SURFACE:
        r = c.region(p)
        if r is not None:
            out.append(r)
    return out


def mean_t4(p):
    """Disc-averaged ``T^4`` [K^4]: the photosphere and its surface regions by area."""
    t4 = p["teff"] ** 4
    reg = regions(p)
    if reg:
        cover = reg[0][0]
        for c, _ in reg[1:]:
            cover = cover + c
        t4 = (1 - cover) * t4
        for c, t in reg:
            t4 = t4 + c * t**4
    return t4
