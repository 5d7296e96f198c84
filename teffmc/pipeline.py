"""The stages of a fit after preparation: sampling, derived quantities, outputs."""

import json
import math
import platform
import sys
from dataclasses import replace
from importlib import metadata

import numpy as np

from . import __version__
from . import posterior as post_mod
from .budget import dimming_budget
from .derived import bolometric
from .goodness import cautions as gof_cautions
from .goodness import BLOCK_VALUES, goodness_of_fit
from .likelihood import pixel_variance
from .model import Terms, band_pixels, observed_flux
from .priors import Prior
from .provenance import data_labels, run_provenance
from .report import write_summary
from .report.output import write_run_products
from .report.tables import strict_json
from .tomlout import dumps_toml

__all__ = ["sample_posterior", "finish_run", "derived_quantities", "VBand"]

CHUNK = 512
MAX_STORED_DRAWS = 8000   # posterior draws kept in posterior.nc (all walkers together)
MAX_GOF_DRAWS = 200       # draws for the goodness-of-fit numbers
MAX_LOO_DRAWS = 2000      # draws with pointwise log-likelihood (PSIS-LOO works well here)
MIN_LOO_DRAWS = 200       # ... and never fewer (very long spectra)
MAX_POINTWISE_VALUES = 50_000_000  # draws x points kept for LOO (200 MB as float32)
CAUTION_GRID = ("The built-in grid comes from teffmc's own approximate LTE synthesis; "
                "for publication-grade temperatures import a validated model grid.")


class SamplerCoordinates:
    """The sampler's coordinates u; draws, summaries and files stay in x.

    * ln x for every parameter with a log-uniform prior: such a prior spanning decades
      is flat in ln x but piles up at the low end in x, and the ensemble moves
      (differences and stretches of walker positions) then mix slowly -- measured on the
      demo with a correlated mismatch term: tau of ``mismatch_scale`` 478 steps sampled
      in x, ~70-100 in ln x.
    * the veil's covering fraction c and optical depth tau, when both are free in an
      epoch, as (c, e) with e = -ln(1 - d) and d = c (1 - exp(-tau)) the fraction of
      the star's light the veil removes at 0.55 micron (before scattering): the data
      measure e almost directly, while c and tau trade along the curved ridge
      c (1 - e^-tau) = d, which the ensemble's straight-line moves cross slowly (tau
      ~300 steps in the issue). In e the dimming is a magnitude-like quantity, so its
      trade with the angular diameter (2 ln theta - e ~ const for grey grains) is a
      straight line too. d = 1 - e^-e, tau = -ln(1 - d / c), 0 <= d < c.

    The density in u carries the Jacobian, log p(u) = log p(x(u)) + log |dx/du| with
    log |dx/du| = sum ln x (log coordinates) + sum [-e - ln(c - d)] (veil pairs), so
    the priors on x are unchanged (tests/test_coordinates.py).
    """

    def __init__(self, space, log_post):
        self.log_post = log_post
        self.space = space
        self.log = np.array([p.kind == "loguniform" for p in space.priors], bool)
        self.pairs = []
        names = list(space.names)
        for k, name in enumerate(names):
            base, at, label = name.partition("@")
            cover = "veil_cover" + at + label
            if base == "veil_tau" and cover in names:
                c = names.index(cover)
                if not (self.log[k] or self.log[c]):
                    self.pairs.append((k, c))
        self.pairs = np.array(self.pairs, int).reshape(-1, 2)

    def to_x(self, u):
        x = np.array(u, float, copy=True)
        x[..., self.log] = np.exp(x[..., self.log])
        t, c = self.pairs[:, 0], self.pairs[:, 1]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            ratio = -np.expm1(-x[..., t]) / x[..., c]          # d / c
            inside = (ratio >= 0) & (ratio < 1)
            x[..., t] = np.where(inside, -np.log1p(-np.where(inside, ratio, 0.0)), np.nan)
        return x

    def to_u(self, x):
        u = np.array(x, float, copy=True)
        u[..., self.log] = np.log(u[..., self.log])
        t, c = self.pairs[:, 0], self.pairs[:, 1]
        u[..., t] = -np.log1p(u[..., c] * np.expm1(-u[..., t]))   # e = -ln(1 - d)
        return u

    def jacobian(self, u):
        u = np.asarray(u)
        t, c = self.pairs[:, 0], self.pairs[:, 1]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            d = -np.expm1(-u[..., t])
            pair = -np.sum(u[..., t] + np.log(u[..., c] - d), axis=-1)
        return np.sum(u[..., self.log], axis=-1) + pair

    def __call__(self, u):
        u = np.atleast_2d(np.asarray(u, float))
        x = self.to_x(u)
        ok = np.all(np.isfinite(x), axis=1)
        out = np.full(u.shape[0], -np.inf)
        if ok.any():
            out[ok] = self.log_post(x[ok]) + self.jacobian(u[ok])
        out[np.isnan(out)] = -np.inf
        return out

    def sample_prior(self, rng, n):
        return self.to_u(self.space.sample_prior(rng, n))

    def result_in_x(self, result):
        """A :class:`~teffmc.sample.SampleResult` in u turned into one in x."""
        return replace(result, chain=self.to_x(result.chain),
                       log_prob=result.log_prob - self.jacobian(result.chain))


#: the former name (log coordinates only)
LogCoordinates = SamplerCoordinates


def hole_cautions(space, grid):
    """Cautions for the parts of the prior that holes in the grid remove from the model.

    The sampler never enters a cell touching a missing model (interpolation there would
    cross the hole), so the posterior is silently truncated there: say where."""
    if not hasattr(grid, "excluded_regions"):
        return []
    box = {}
    for ax in ("teff", "logg", "mh"):
        ps = [space.prior_of(ax, lab) for lab in space.labels]
        box[ax] = (min(p.support[0] for p in ps), max(p.support[1] for p in ps))
    units = {"teff": " K", "logg": "", "mh": ""}
    out = []
    for node, region in grid.excluded_regions(box):
        where = ", ".join(f"{ax} {lo:g}-{hi:g}{units[ax]}" if lo != hi else f"{ax} {lo:g}"
                          for ax, (lo, hi) in region.items())
        out.append(f"the grid has no model at teff={node[0]:g}, logg={node[1]:g}, "
                   f"mh={node[2]:g}: the region {where} inside the prior is excluded "
                   "from the fit (no interpolation across a hole)")
    return out


def sample_posterior(prep, checkpoint, *, resume, quiet, log):
    """Optimised start, then emcee until converged or out of steps (in the coordinates
    of :class:`SamplerCoordinates`)."""
    from .sample import find_start, run_sampler
    from .sampling_start import laplace_ball

    s = prep.config.sampler
    coords = SamplerCoordinates(prep.space, prep.log_post)
    rng = np.random.default_rng(s.seed)
    x0 = None
    if not resume:
        x0 = find_start(coords, coords.sample_prior, n_starts=s.n_starts, rng=rng)
        log("start: " + ", ".join(f"{n}={v:.4g}" for n, v in zip(prep.space.names,
                                                                 coords.to_x(x0))))
        # walkers from the Laplace approximation at the optimum: a start in the typical
        # set (tau before/after in DEVELOPERS.md, bench/bench_speed.py)
        x0 = laplace_ball(coords, x0, rng, s.n_walkers,
                          1e-3 * np.where(x0 != 0, np.abs(x0), 1.0))
    result = run_sampler(coords, x0, names=prep.space.names, n_walkers=s.n_walkers,
                         seed=s.seed, max_steps=s.max_steps, min_steps=s.min_steps,
                         check_every=s.check_every, checkpoint=checkpoint, resume=resume,
                         progress=not quiet, log=log)
    return coords.result_in_x(result)


class VBand:
    """Model Bessell V (Vega system) at Earth for a batch of parameters, on one epoch."""

    def __init__(self, grid, model, r_v_prior):
        from .observe import BandSet

        wave = band_pixels(grid.wave, ["bessell-V"])
        self.grid = grid.on_pixels(wave)
        self.terms = Terms(wave, model, r_v_prior)
        self.bands = BandSet(["bessell-V"], ["vega"], wave)

    def __call__(self, p):
        return self.bands.mags(observed_flux(self.grid, self.terms, p))[:, 0]


def _chunked(fn, flat, dtype=None, n_points=1):
    """fn on blocks of draws (at most CHUNK, and ~BLOCK_VALUES draws x points)."""
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
        out["v_mag" + suffix] = _chunked(
            lambda x, label=label: vband(space.epoch_values(x, label)), flat)
    if space.multi:
        ref = space.labels[0]
        pa = space.epoch_values(flat, ref)
        for label in space.labels[1:]:
            pb = space.epoch_values(flat, label)
            out[f"delta_teff@{label}"] = pb["teff"] - pa["teff"]
            parts = _chunked(lambda idx, pb=pb: dimming_budget(
                vband, _take(pa, idx), _take(pb, idx)), np.arange(flat.shape[0]))
            for k, v in parts.items():
                out[f"{k}@{label}"] = v
    if dist is not None:
        out["distance_pc"] = dist
    return out


def _positive_draws(prior, rng, n):
    """n draws of a distance or parallax prior restricted to > 0.

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


def _versions():
    out = {"python": platform.python_version(), "teffmc": __version__}
    for pkg in ("numpy", "scipy", "astropy", "emcee", "arviz", "dust_extinction", "speclite",
                "miepython", "matplotlib", "dynesty", "numba", "jinja2"):
        try:
            out[pkg] = metadata.version(pkg)
        except metadata.PackageNotFoundError:
            out[pkg] = "not installed"
    return out


def _panels(prep, predictive):
    panels, names = [], data_labels(prep.config)
    for label, chans in prep.channels.items():
        for ch in chans:
            key = f"{label}.{ch.name}"
            draws = predictive[key].reshape(-1, ch.n_points)
            pan = {"kind": ch.kind, "label": names.get(key, f"{label}: {ch.name}"),
                   "data": ch.data,
                   "err": ch.err, "draws": draws}
            if ch.kind == "spectrum":
                pan["x"] = ch.wave
            else:
                pan["x"], pan["bands"] = ch.bandset.pivot, ch.bands
            panels.append(pan)
    return panels


def _predict(prep, x):
    """Model predictions (calibration polynomial applied) per channel for draws x."""
    from .observe.calibration import calibration_mean

    out = {}
    for label, chans in prep.channels.items():
        p = prep.space.epoch_values(x, label)
        for ch in chans:
            m = ch.predict(p)
            if ch.kind == "spectrum" and ch.basis is not None:
                var = pixel_variance(ch, p, m, for_polynomial=True)
                m = m * (1.0 + calibration_mean(ch.data, var, m, ch.basis,
                                                np.full(ch.basis.shape[0],
                                                        ch.calibration_sigma)))
            out[f"{label}.{ch.name}"] = m
    return out


def loo_draws(prep):
    """How many draws get pointwise log-likelihoods: MAX_LOO_DRAWS, fewer for very long
    spectra so that the n_draws x n_points array stays within MAX_POINTWISE_VALUES (at
    least MIN_LOO_DRAWS; PSIS's Pareto k says when that is too few)."""
    n_points = sum(ch.n_points for chans in prep.channels.values() for ch in chans)
    return int(min(MAX_LOO_DRAWS, max(MIN_LOO_DRAWS, MAX_POINTWISE_VALUES // n_points)))


def finish_run(prep, result, folder, *, log, hypothesis=None):
    """Derived quantities, posterior.nc, summaries, figures, run.toml, log.txt."""
    cfg, space = prep.config, prep.space
    n_draws, n_walkers, ndim = result.chain.shape
    keep = max(1, math.ceil(n_draws * n_walkers / MAX_STORED_DRAWS))
    if keep > 1:  # the chain is longer than a summary needs: store every keep-th draw
        result = replace(result, chain=result.chain[::keep], log_prob=result.log_prob[::keep])
        n_draws = result.chain.shape[0]
    flat = result.chain.reshape(-1, ndim)
    rng = np.random.default_rng(cfg.sampler.seed + 1)
    log(f"derived quantities on {flat.shape[0]} draws")
    derived = {k: v.reshape(n_draws, n_walkers)
               for k, v in derived_quantities(prep, flat, rng).items()}
    # pointwise log-likelihood (for PSIS-LOO) on at most MAX_LOO_DRAWS draws: it is
    # n_draws x n_pixels, by far the largest part of posterior.nc
    every = max(1, math.ceil(n_draws * n_walkers / loo_draws(prep)))
    loo_chain = result.chain[::every]
    pointwise = _chunked(prep.log_post.pointwise, loo_chain.reshape(-1, ndim), np.float32,
                         n_points=sum(ch.n_points for cs in prep.channels.values() for ch in cs))
    pointwise = {k: v.reshape(loo_chain.shape[0], n_walkers, -1)
                 for k, v in pointwise.items()}
    sub = result.chain[-min(n_draws, 4):]
    predictive = {k: v.reshape(sub.shape[0], n_walkers, -1)
                  for k, v in _predict(prep, sub.reshape(-1, ndim)).items()}
    observed = {f"{label}.{ch.name}": ch.data
                for label, chans in prep.channels.items() for ch in chans}
    grid_checksum = prep.grid.checksum
    record = {
        "teffmc": {"version": __version__, "seed": cfg.sampler.seed,
                   "grid": cfg.grid, "grid_checksum": grid_checksum,
                   "command": " ".join(sys.argv), "versions": _versions(),
                   "free_parameters": list(space.names), "fixed": space.fixed_values(),
                   "priors": space.priors_dict(), "data_checksum": data_checksum(prep),
                   "provenance": run_provenance(prep)},
        **cfg.raw,
    }
    attrs = {"config": dumps_toml(record), "seed": cfg.sampler.seed,
             "grid_checksum": grid_checksum, "versions": _versions(),
             "converged": int(result.converged), "reason": result.reason,
             "data_checksum": data_checksum(prep), "model": json.dumps(vars(cfg.model))}
    constant, channels = {}, []
    for pan, key in zip(_panels(prep, predictive), observed):
        constant[f"{key}__x"], constant[f"{key}__err"] = pan["x"], pan["err"]
        channels.append({"key": key, "kind": pan["kind"], "label": pan["label"],
                         "bands": list(pan.get("bands", []))})
    attrs["channels"] = json.dumps(channels)
    attrs["title"] = cfg.name
    dt = post_mod.build(result, derived=derived, pointwise=pointwise, observed=observed,
                        predictive=predictive, attrs=attrs, constant=constant)
    post_mod.save(dt, folder / "posterior.nc")
    gof = goodness_of_fit(prep, flat[rng.permutation(flat.shape[0])[:MAX_GOF_DRAWS]], rng)
    for key, g in gof.items():
        log(f"fit of {key}: chi2/nu = {g['chi2_nu']:.2f} ({g['n_points']} points), "
            f"rms {g['rms_sigma']:.2f} sigma, posterior-predictive p = {g['ppc_p']:.3f}")
    summary = {
        "hypothesis": hypothesis,
        "converged": bool(result.converged),
        "reason": result.reason,
        "n_steps": int(result.n_steps), "n_walkers": int(n_walkers),
        "burn": int(result.burn), "thin": int(result.thin),
        "acceptance_fraction": float(np.mean(result.acceptance_fraction)),
        "tau": {n: float(t) for n, t in zip(space.names, result.tau)},
        "parameters": post_mod.summarise(dt, space.names),
        "derived": post_mod.summarise(dt, list(derived)),
        "fixed": space.fixed_values(),
        "epochs": list(space.labels),
        "grid": {"name": cfg.grid, "checksum": grid_checksum},
        "goodness_of_fit": gof,
        "cautions": ([] if result.converged else [f"not converged: {result.reason}"])
        + gof_cautions(gof)
        + hole_cautions(space, prep.grid)
        + ([CAUTION_GRID] if cfg.grid == "builtin" else []),
    }
    if cfg.sampler.evidence:
        from .evidence import log_evidence

        logz, logz_err, ncall = log_evidence(prep.log_post, space, seed=cfg.sampler.seed,
                                             nlive=cfg.sampler.nlive)
        summary["evidence"] = {"log_z": logz, "log_z_err": logz_err, "n_calls": ncall,
                               "method": "nested sampling (dynesty)"}
        log(f"evidence: ln Z = {logz:.2f} +- {logz_err:.2f} ({ncall} likelihood calls)")
    _add_stat_intervals(summary, space, flat, derived)
    write_summary(summary, folder / "summary.json", folder / "summary.ecsv")
    (folder / "run.toml").write_text(dumps_toml(record), encoding="utf-8")
    log("report: figures, tables, methods, report.html")
    for c in summary["cautions"]:
        log("CAUTION: " + c)
    log(f"done: {folder.name.removesuffix('.partial')}")
    (folder / "log.txt").write_text("\n".join(log.lines) + "\n", encoding="utf-8")
    write_run_products(folder, dt=dt, summary=strict_json(summary))
    return dt, summary


def _add_stat_intervals(summary, space, flat, derived):
    """Beside each interval, the one with the grid-physics nuisances at nominal."""
    from .systematics import stat_summary

    cols = [i for i, n in enumerate(space.names) if n.partition("@")[0] in space.nuisance_params]
    if not cols:
        return
    x = np.log(flat[:, cols])
    summary["nuisance"] = [space.names[i] for i in cols]
    for i, name in enumerate(space.names):
        if i not in cols:
            summary["parameters"][name].update(stat_summary(flat[:, i], x))
    for name, v in derived.items():
        if name in summary["derived"]:
            summary["derived"][name].update(stat_summary(v.reshape(-1), x))


def data_checksum(prep):
    """SHA-256 of the data actually fitted (pixels, fluxes, errors, bands)."""
    import hashlib

    h = hashlib.sha256()
    for label, chans in prep.channels.items():
        h.update(label.encode())
        for ch in chans:
            h.update(ch.name.encode())
            # the data's own pixels; photometry by its bands (its model pixels belong to
            # the grid, and runs with different grids fit the same data)
            x = ch.wave if ch.kind == "spectrum" else np.zeros(0)
            for a in (ch.data, ch.err, x):
                h.update(np.ascontiguousarray(a, "<f8").tobytes())
            if ch.kind == "photometry":
                h.update("|".join(ch.bands).encode())
    return h.hexdigest()
