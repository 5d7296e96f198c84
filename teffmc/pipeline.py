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
from .derived import chunked, derived_quantities
from .goodness import cautions as gof_cautions
from .goodness import goodness_of_fit
from .likelihood import pixel_variance
from .provenance import data_labels, run_provenance
from .report import write_summary
from .report.output import write_run_products
from .report.tables import strict_json
from .sampling_coords import SamplerCoordinates
from .tomlout import dumps_toml

__all__ = ["sample_posterior", "finish_run", "hole_cautions", "loo_draws", "data_checksum"]

MAX_STORED_DRAWS = 8000   # posterior draws kept in posterior.nc (all walkers together)
MAX_GOF_DRAWS = 200       # draws for the goodness-of-fit numbers
MAX_LOO_DRAWS = 2000      # draws with pointwise log-likelihood (PSIS-LOO works well here)
MIN_LOO_DRAWS = 200       # ... and never fewer (very long spectra)
MAX_POINTWISE_VALUES = 50_000_000  # draws x points kept for LOO (200 MB as float32)
CAUTION_GRID = ("The built-in grid comes from teffmc's own approximate LTE synthesis; "
                "for publication-grade temperatures import a validated model grid.")


def hole_cautions(space, grid):
    """Cautions for the parts of the prior that holes in the grid remove from the model.

    The sampler never enters a cell touching a missing model (interpolation there would
    cross the hole), so the posterior is silently truncated there: say where.
    """
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
    """Sample: optimised start, then emcee until converged or out of steps.

    In the coordinates of :class:`SamplerCoordinates`.
    """
    from .sample import find_start, run_sampler
    from .sampling_colour import table_for
    from .sampling_start import laplace_ball

    s = prep.config.sampler
    coords = SamplerCoordinates(prep.space, prep.log_post,
                                colour=table_for(prep.space, prep.grid))
    if coords.colour is not None:
        log("sampling theta and a_v as the grid's synthetic V and V - Ks (colour coordinates)")
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
    """Return how many draws get pointwise log-likelihoods.

    MAX_LOO_DRAWS, fewer for very long spectra so that the n_draws x n_points array stays
    within MAX_POINTWISE_VALUES (at least MIN_LOO_DRAWS; PSIS's Pareto k says when that is
    too few).
    """
    n_points = sum(ch.n_points for chans in prep.channels.values() for ch in chans)
    return int(min(MAX_LOO_DRAWS, max(MIN_LOO_DRAWS, MAX_POINTWISE_VALUES // n_points)))


def finish_run(prep, result, folder, *, log, hypothesis=None):
    """Write derived quantities, posterior.nc, summaries, figures, run.toml, log.txt."""
    cfg = prep.config
    result = _thinned(result)
    n_draws, n_walkers, ndim = result.chain.shape
    flat = result.chain.reshape(-1, ndim)
    rng = np.random.default_rng(cfg.sampler.seed + 1)
    log(f"derived quantities on {flat.shape[0]} draws")
    derived = {k: v.reshape(n_draws, n_walkers)
               for k, v in derived_quantities(prep, flat, rng).items()}
    sub = result.chain[-min(n_draws, 4):]
    predictive = {k: v.reshape(sub.shape[0], n_walkers, -1)
                  for k, v in _predict(prep, sub.reshape(-1, ndim)).items()}
    observed = {f"{label}.{ch.name}": ch.data
                for label, chans in prep.channels.items() for ch in chans}
    record = _run_record(prep)
    attrs, constant = _attrs(prep, result, record, predictive, observed)
    dt = post_mod.build(result, derived=derived, pointwise=_pointwise(prep, result),
                        observed=observed, predictive=predictive, attrs=attrs,
                        constant=constant)
    post_mod.save(dt, folder / "posterior.nc")
    gof = goodness_of_fit(prep, flat[rng.permutation(flat.shape[0])[:MAX_GOF_DRAWS]], rng)
    for key, g in gof.items():
        log(f"fit of {key}: chi2/nu = {g['chi2_nu']:.2f} ({g['n_points']} points), "
            f"rms {g['rms_sigma']:.2f} sigma, posterior-predictive p = {g['ppc_p']:.3f}")
    summary = _summary(prep, result, dt, list(derived), gof, hypothesis)
    if cfg.sampler.evidence:
        summary["evidence"] = _evidence(prep, log)
    _add_stat_intervals(summary, prep.space, flat, derived)
    write_summary(summary, folder / "summary.json", folder / "summary.ecsv")
    (folder / "run.toml").write_text(dumps_toml(record), encoding="utf-8")
    log("report: figures, tables, methods, report.html")
    for c in summary["cautions"]:
        log("CAUTION: " + c)
    log(f"done: {folder.name.removesuffix('.partial')}")
    (folder / "log.txt").write_text("\n".join(log.lines) + "\n", encoding="utf-8")
    write_run_products(folder, prep.config.report_formats, dt=dt, summary=strict_json(summary))
    return dt, summary


def _thinned(result):
    """Return the result with every keep-th draw when the chain is longer than needed.

    At most MAX_STORED_DRAWS draws of all walkers together are stored.
    """
    n_draws, n_walkers, _ = result.chain.shape
    keep = max(1, math.ceil(n_draws * n_walkers / MAX_STORED_DRAWS))
    if keep == 1:
        return result
    return replace(result, chain=result.chain[::keep], log_prob=result.log_prob[::keep])


def _pointwise(prep, result):
    """Compute the pointwise log-likelihood (for PSIS-LOO) on at most :func:`loo_draws` draws.

    As float32: it is n_draws x n_points, by far the largest part of posterior.nc.
    """
    n_draws, n_walkers, ndim = result.chain.shape
    every = max(1, math.ceil(n_draws * n_walkers / loo_draws(prep)))
    loo_chain = result.chain[::every]
    pointwise = chunked(prep.log_post.pointwise, loo_chain.reshape(-1, ndim), np.float32,
                        n_points=sum(ch.n_points for cs in prep.channels.values() for ch in cs))
    return {k: v.reshape(loo_chain.shape[0], n_walkers, -1) for k, v in pointwise.items()}


def _run_record(prep):
    """Return what run.toml holds: the config as read, and a [teffmc] table.

    The [teffmc] table records what the run used (version, seed, grid and data checksums,
    priors, provenance).
    """
    cfg, space = prep.config, prep.space
    return {
        "teffmc": {"version": __version__, "seed": cfg.sampler.seed,
                   "grid": cfg.grid, "grid_checksum": prep.grid.checksum,
                   "command": " ".join(sys.argv), "versions": _versions(),
                   "free_parameters": list(space.names), "fixed": space.fixed_values(),
                   "priors": space.priors_dict(), "data_checksum": data_checksum(prep),
                   "provenance": run_provenance(prep)},
        **cfg.raw,
    }


def _attrs(prep, result, record, predictive, observed):
    """posterior.nc's attributes and its constant data (each channel's x and errors)."""
    cfg = prep.config
    attrs = {"config": dumps_toml(record), "seed": cfg.sampler.seed,
             "grid_checksum": prep.grid.checksum, "versions": _versions(),
             "converged": int(result.converged), "reason": result.reason,
             "data_checksum": data_checksum(prep), "model": json.dumps(vars(cfg.model))}
    constant, channels = {}, []
    for pan, key in zip(_panels(prep, predictive), observed):
        constant[f"{key}__x"], constant[f"{key}__err"] = pan["x"], pan["err"]
        channels.append({"key": key, "kind": pan["kind"], "label": pan["label"],
                         "bands": list(pan.get("bands", []))})
    attrs["channels"] = json.dumps(channels)
    attrs["title"] = cfg.name
    return attrs, constant


def _summary(prep, result, dt, derived_names, gof, hypothesis):
    """summary.json's content (without the evidence and the statistical-only intervals)."""
    cfg, space = prep.config, prep.space
    return {
        "hypothesis": hypothesis,
        "converged": bool(result.converged),
        "reason": result.reason,
        "n_steps": int(result.n_steps), "n_walkers": int(result.chain.shape[1]),
        "burn": int(result.burn), "thin": int(result.thin),
        "acceptance_fraction": float(np.mean(result.acceptance_fraction)),
        "tau": {n: float(t) for n, t in zip(space.names, result.tau)},
        "parameters": post_mod.summarise(dt, space.names),
        "derived": post_mod.summarise(dt, derived_names),
        "fixed": space.fixed_values(),
        "epochs": list(space.labels),
        "grid": {"name": cfg.grid, "checksum": prep.grid.checksum},
        "goodness_of_fit": gof,
        "cautions": ([] if result.converged else [f"not converged: {result.reason}"])
        + gof_cautions(gof)
        + hole_cautions(space, prep.grid)
        + ([CAUTION_GRID] if cfg.grid == "builtin" else []),
    }


def _evidence(prep, log):
    """Compute ln Z by nested sampling (``[sampler] evidence = true``)."""
    from .evidence import log_evidence

    s = prep.config.sampler
    logz, logz_err, ncall = log_evidence(prep.log_post, prep.space, seed=s.seed,
                                         nlive=s.nlive)
    log(f"evidence: ln Z = {logz:.2f} +- {logz_err:.2f} ({ncall} likelihood calls)")
    return {"log_z": logz, "log_z_err": logz_err, "n_calls": ncall,
            "method": "nested sampling (dynesty)"}


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
