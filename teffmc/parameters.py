"""Which parameters a model has, their default priors, and the vector layout.

A fit samples a flat vector per walker. :class:`ParameterSpace` maps that vector
to named arrays per epoch: shared parameters have one column, per-epoch ones have
one column per epoch (named ``name@label`` when there are several epochs); fixed
parameters have no column.
"""

import math
from dataclasses import dataclass

import numpy as np

from .components import COMPONENTS, active_parameters, all_parameters
from .errors import ConfigError
from .priors import Prior

__all__ = ["ParameterSpace", "model_parameters", "parameter_limits", "UNITS", "LABELS",
           "POSITIVE", "LIMITS", "DEFAULT_SHARED", "ALL_PARAMETERS", "WORDS", "CORNER_RANK"]

_DECL = all_parameters()
#: every parameter any model variant can have (declared by teffmc.components)
ALL_PARAMETERS = tuple(_DECL)
#: the built-in grid's nuisance parameters (declared by the grid file; always shared)
NUISANCE_PARAMETERS = ("tio_scale", "haze_scale")
#: parameters that must stay > 0 (they enter through a logarithm or a square)
POSITIVE = tuple(n for n, d in _DECL.items() if d.open_low) + NUISANCE_PARAMETERS
#: physical limits of parameters, whatever the model: {name: (low, high, why)}
LIMITS = {n: (d.low, d.high, d.why) for n, d in _DECL.items()
          if (d.low > -math.inf or d.high < math.inf) and not d.open_low}
#: parameters common to all epochs unless the config's ``shared`` says otherwise
DEFAULT_SHARED = tuple(n for n, d in _DECL.items() if d.shared) + NUISANCE_PARAMETERS
#: parameters placed after the grid's nuisances (components with AFTER_NUISANCES)
LATE_PARAMETERS = tuple(d.name for c in COMPONENTS if getattr(c, "AFTER_NUISANCES", False)
                        for d in c.PARAMETERS)
UNITS = {**{n: d.unit for n, d in _DECL.items()}, "tio_scale": "", "haze_scale": "",
         "rv_kms": "km/s", "distance_pc": "pc"}
#: names in plain words (the methods text)
WORDS = {**{n: d.words or n for n, d in _DECL.items()}, "tio_scale": "TiO opacity scale",
         "haze_scale": "line-haze scale"}
LABELS = {**{n: d.label for n, d in _DECL.items()}, "tio_scale": r"$s_\mathrm{TiO}$",
          "haze_scale": r"$s_\mathrm{haze}$", "distance_pc": "d [pc]"}
#: the corner plot's order of the parameters that declare one (lower first)
CORNER_RANK = {n: d.corner_rank for n, d in _DECL.items() if d.corner_rank is not None}


def parameter_limits(base, model):
    """Return (low, high, why) the core accepts for one parameter of ``model``, or None.

    The limits its component declares (:mod:`teffmc.components`): the ``limits(model)``
    of its :class:`~teffmc.components.Param` where they depend on the model variant
    (R_V on the extinction law, the grain radius on the optics table), else its fixed
    physical limits.
    """
    d = _DECL.get(base)
    if d is not None and d.limits is not None:
        return d.limits(model)
    return LIMITS.get(base)


def model_parameters(model, grid_bounds, nuisance=()):
    """Names and default priors of the parameters of a model variant.

    Parameters
    ----------
    model : teffmc.config.ModelSpec
    grid_bounds : dict
        ``{axis: (low, high)}`` of the photosphere grid.
    nuisance : sequence of NuisanceAxis
        The grid's nuisance axes (sampled as ``<name>_scale`` when
        ``model.grid_nuisance``).
    """
    active = active_parameters(model)
    p = {}
    for name, d in active.items():
        if name in LATE_PARAMETERS:
            continue
        p[name] = d.default_prior(model, grid_bounds)
    if getattr(model, "grid_nuisance", True):
        for a in nuisance:
            # the grid's own declared range of the uncertain input (see its note)
            p[a.parameter] = Prior("loguniform", low=a.low, high=a.high)
    # components declaring AFTER_NUISANCES come after the nuisances (the cool patches:
    # the vector layout of runs made before the components were declared)
    for name in LATE_PARAMETERS:
        if name in active:
            p[name] = active[name].default_prior(model, grid_bounds)
    return p


@dataclass(frozen=True)
class _Slot:
    base: str
    column: int | None   # None when fixed
    value: float         # used when fixed


def _check_limits(base, prior, model, file, key):
    limits = parameter_limits(base, model)
    if limits is None:
        return
    lo, hi, why = limits
    plo, phi = prior.support
    if plo < lo or phi > hi:
        what = (f"the prior's range [{plo:g}, {phi:g}]" if plo != phi
                else f"the fixed value {plo:g}")
        raise ConfigError(f"{what} reaches outside [{lo:g}, {hi:g}] ({why})"
                          + ("; use truncnormal for a normal prior" if prior.kind == "normal"
                             else ""), file=file, key=f"priors.{key}", value=(plo, phi))


def _checked_priors(config, defaults, sibling, labels, file):
    """Return the default priors overridden by the config's, each checked.

    A parameter of this model (a sibling hypothesis's is skipped), a known epoch label, no
    per-epoch prior of a shared parameter, > 0 where it must be, within the parameter's
    limits.
    """
    multi = len(labels) > 1
    priors = dict(defaults)
    for key, prior in config.priors.items():
        base, _, label = key.partition("@")
        if base in sibling and base not in defaults:
            continue
        if base not in defaults:
            raise ConfigError(f"not a parameter of this model (parameters: "
                              f"{', '.join(defaults)})", file=file, key=f"priors.{key}",
                              value=key)
        if label and label not in labels:
            raise ConfigError(f"no epoch labelled {label!r} (epochs: {', '.join(labels)})",
                              file=file, key=f"priors.{key}", value=key)
        if label and multi and base in config.shared:
            raise ConfigError(f"{base} is shared by all epochs: give priors.{base}, or "
                              f"remove {base} from shared", file=file, key=f"priors.{key}",
                              value=key)
        if base in POSITIVE and prior.support[0] <= 0:
            raise ConfigError(f"{base} must be > 0 but the prior reaches "
                              f"{prior.support[0]:g}", file=file, key=f"priors.{key}",
                              value=prior.support[0])
        _check_limits(base, prior, config.model, file, key)
        priors[base if label and not multi else key] = prior
    return priors


def _check_grid_ranges(priors, grid_bounds, file):
    """Check that the priors of the grid's axes stay inside the grid."""
    for axis in ("teff", "logg", "mh"):
        for key in [k for k in priors if k.partition("@")[0] == axis]:
            lo, hi = priors[key].support
            glo, ghi = grid_bounds[axis]
            if lo < glo or hi > ghi:
                raise ConfigError(
                    f"prior range [{lo:g}, {hi:g}] reaches outside the grid's "
                    f"[{glo:g}, {ghi:g}]", file=file, key=f"priors.{key}", value=(lo, hi))


class ParameterSpace:
    """The mapping between a flat sampled vector and named per-epoch parameters."""

    def __init__(self, config, grid_bounds, *, other_models=(), nuisance=()):
        defaults = model_parameters(config.model, grid_bounds, nuisance)
        # priors for parameters of sibling hypotheses are allowed (and unused) here
        sibling = set()
        for m in other_models:
            sibling |= set(model_parameters(m, grid_bounds, nuisance))
        known = set(ALL_PARAMETERS) | {a.parameter for a in nuisance}
        #: the grid-physics nuisance parameters of this fit (their "_scale" names)
        self.nuisance_params = tuple(a.parameter for a in nuisance
                                     if getattr(config.model, "grid_nuisance", True))
        file = str(config.path)
        labels = [e.label for e in config.epochs]
        for s in config.shared:
            if s not in known and s not in NUISANCE_PARAMETERS:
                raise ConfigError(f"{s!r} is not a parameter name (names: "
                                  f"{', '.join(ALL_PARAMETERS)})",
                                  file=file, key="shared", value=s)
        priors = _checked_priors(config, defaults, sibling, labels, file)
        _check_grid_ranges(priors, grid_bounds, file)
        self.labels = labels
        self.multi = len(labels) > 1
        self.names, self.priors, self._slots = [], [], {}
        for base in defaults:
            # the grid's physics is the same at every epoch: nuisances are always shared
            per_epoch = (self.multi and base not in config.shared
                         and base not in self.nuisance_params)
            keys = [f"{base}@{lab}" for lab in labels] if per_epoch else [base]
            for key, lab in zip(keys, labels if per_epoch else [None]):
                prior = priors.get(key, priors[base])
                slot = self._add(key, base, prior)
                for label in ([lab] if lab else labels):
                    self._slots[(label, base)] = slot
        self.base_names = list(defaults)

    def prior_of(self, base, label=None):
        """Return the prior of a base parameter in epoch ``label`` (default: the first epoch)."""
        slot = self._slots[(label or self.labels[0], base)]
        if slot.column is None:
            return Prior("fixed", value=slot.value)
        return self.priors[slot.column]

    def prior_cover(self, base):
        """One prior whose support covers the parameter in every epoch (for tables)."""
        ps = [self.prior_of(base, lab) for lab in self.labels]
        if all(p.fixed for p in ps) and len({p.value for p in ps}) == 1:
            return ps[0]
        return Prior("uniform", low=min(p.support[0] for p in ps),
                     high=max(p.support[1] for p in ps))

    def _add(self, key, base, prior):
        if prior.fixed:
            return _Slot(base, None, prior.value)
        self.names.append(key)
        self.priors.append(prior)
        return _Slot(base, len(self.names) - 1, np.nan)

    @property
    def ndim(self):
        """Return the number of sampled parameters (the fixed ones aside)."""
        return len(self.names)

    def log_prior(self, x):
        """Sum of log prior densities, shape (n,)."""
        x = np.atleast_2d(x)
        lp = np.zeros(x.shape[0])
        for i, pr in enumerate(self.priors):
            lp += pr.logpdf(x[:, i])
        return lp

    def sample_prior(self, rng, n):
        """Draw ``n`` points from the priors with ``rng``, shape (n, ndim)."""
        return np.column_stack([pr.sample(rng, n) for pr in self.priors])

    def epoch_values(self, x, label):
        """``{base_name: array (n,)}`` for one epoch."""
        x = np.atleast_2d(x)
        out = {}
        for base in self.base_names:
            slot = self._slots[(label, base)]
            out[base] = (x[:, slot.column] if slot.column is not None
                         else np.full(x.shape[0], slot.value))
        return out

    def fixed_values(self):
        """``{name: value}`` of the parameters held fixed (for the run record)."""
        out = {}
        for (label, base), slot in self._slots.items():
            if slot.column is None:
                shared = all(self._slots[(lab, base)] is slot for lab in self.labels)
                out[base if shared else f"{base}@{label}"] = slot.value
        return out

    def priors_dict(self):
        """Return ``{name: prior as a plain dict}`` of the sampled parameters (run.toml)."""
        return {n: p.to_dict() for n, p in zip(self.names, self.priors)}
