"""Derived quantities computed on every posterior draw.

Notes
-----
Angular diameter ``theta`` and distance ``d`` give the radius ``R = theta/2 * d``;
the luminosity is ``L = 4 pi R^2 sigma Teff^4`` and the bolometric flux at Earth
(before extinction) ``f_bol = (theta/2)^2 sigma Teff^4`` (Stefan-Boltzmann law).
With surface regions (cool patches, ...) the luminosity uses the disc-averaged
``sigma T^4`` (:func:`teffmc.components.mean_t4`).
:func:`derived_quantities` gives them, the model V magnitude and, between epochs,
Delta Teff and the dimming budget (teffmc.budget), on every draw of a run.
"""

import math

import numpy as np

from .budget import dimming_budget
from .components import mean_t4
from .goodness import BLOCK_VALUES
from .model import MAS_TO_RAD, Terms, band_pixels, observed_flux
from .priors import Prior

__all__ = ["SIGMA_SB", "PC_M", "R_SUN_M", "L_SUN_W", "luminosity", "bolometric",
           "derived_quantities", "VBand", "chunked"]

CHUNK = 512   # draws per block at most (see chunked)

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


class VBand:
    """Model Bessell V (Vega system) at Earth for a batch of parameters, on one epoch."""

    def __init__(self, grid, model, r_v_prior):
        from .observe import BandSet

        wave = band_pixels(grid.wave, ["bessell-V"])
        self.grid = grid.on_pixels(wave)
        self.terms = Terms(wave, model, r_v_prior)
        self.bands = BandSet(["bessell-V"], ["vega"], wave)

    def __call__(self, p):
        """Return V [mag] for the parameters ``p`` ({name: (n,)}), shape (n,)."""
        return self.bands.mags(observed_flux(self.grid, self.terms, p))[:, 0]


def chunked(fn, flat, dtype=None, n_points=1):
    """Apply ``fn`` on blocks of draws (at most CHUNK, and ~BLOCK_VALUES draws x points)."""
    step = max(1, min(CHUNK, BLOCK_VALUES // max(n_points, 1)))
    parts = [fn(flat[i:i + step]) for i in range(0, flat.shape[0], step)]
    if dtype is not None:  # each part converted as it comes (peak memory)
        parts = [{k: v.astype(dtype) for k, v in p.items()} if isinstance(p, dict)
                 else p.astype(dtype) for p in parts]
    if isinstance(parts[0], dict):
        return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    return np.concatenate(parts)


def derived_quantities(prep, flat, rng):
    """``{name: (n,)}`` derived quantities on every draw in ``flat`` (n, ndim)."""
    cfg, space = prep.config, prep.space
    dist = None
    if cfg.distance_pc is not None:
        dist = _positive_draws(cfg.distance_pc, rng, flat.shape[0])
    elif cfg.parallax_mas is not None:
        # distance = 1000 / parallax [pc, mas]; the data do not constrain it, so drawing it
        # from its prior on every draw is the exact joint posterior
        dist = 1000.0 / _positive_draws(cfg.parallax_mas, rng, flat.shape[0])
    vband = VBand(prep.grid, cfg.model, space.prior_cover("r_v"))
    out = {}
    for label in space.labels:
        suffix = f"@{label}" if space.multi else ""
        p = space.epoch_values(flat, label)
        for k, v in bolometric(p, dist).items():
            out[k + suffix] = v
        out["v_mag" + suffix] = chunked(
            lambda x, label=label: vband(space.epoch_values(x, label)), flat)
    if space.multi:
        ref = space.labels[0]
        pa = space.epoch_values(flat, ref)
        for label in space.labels[1:]:
            pb = space.epoch_values(flat, label)
            out[f"delta_teff@{label}"] = pb["teff"] - pa["teff"]
            parts = chunked(lambda idx, pb=pb: dimming_budget(
                vband, _take(pa, idx), _take(pb, idx)), np.arange(flat.shape[0]))
            for k, v in parts.items():
                out[f"{k}@{label}"] = v
    if dist is not None:
        out["distance_pc"] = dist
    return out


def _positive_draws(prior, rng, n):
    """Draw ``n`` values of a distance or parallax prior restricted to > 0.

    A normal prior is drawn from its positive part directly, by the inverse CDF of the
    normal truncated at 0: bounded time whatever its mass below 0 (redrawing the
    non-positive draws took ~1/P(x > 0) rounds; config.py refuses P(x > 0) < 1e-3).
    """
    if prior.fixed:
        return np.full(n, prior.value)
    if prior.kind == "normal":
        prior = Prior("truncnormal", mean=prior.mean, sd=prior.sd, low=0.0, high=math.inf)
    return prior.sample(rng, n)


def _take(p, idx):
    return {k: v[idx] for k, v in p.items()}
