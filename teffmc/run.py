"""The main job: config file -> posterior -> run folder.

Everything the user gave is read and validated before anything is written, so bad
input leaves nothing behind. The run is built in ``OUT.partial/`` (which also holds
the sampler checkpoint for ``--resume``) and renamed to ``OUT`` when complete, its
completion marker written last; one writer at a time (see :mod:`teffmc.runfolder`).
"""

import shutil
import sys
import time
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from . import __version__
from .config import load_config
from .constants import C_KMS
from .errors import ConfigError, DataError, TeffmcError
from .likelihood import Posterior
from .model import PhotometryChannel, SpectrumChannel
from .parameters import ParameterSpace
from .runfolder import (
    MARKER,
    check_out_folder,
    check_replace,
    discard,
    finish,
    is_complete,
    remove_leftovers,
    run_lock,
    write_marker,
)

__all__ = ["fit", "FitResult", "prepare", "Prepared"]

RUN_FILES = ("posterior.nc", "summary.json", "summary.ecsv", "run.toml", "corner.png",
             "fit.png", "log.txt")


@dataclass
class FitResult:
    """What :func:`fit` returns: ``summary`` (as summary.json), ``posterior``, folder ``out``."""

    summary: dict
    posterior: object
    out: Path
    comparison: object = None


@dataclass
class Prepared:
    """A config turned into a ready-to-sample posterior density."""

    config: object
    grid: object
    space: ParameterSpace
    channels: dict
    log_post: Posterior


class _Log:
    def __init__(self, quiet):
        self.lines, self.quiet, self.t0 = [], quiet, time.perf_counter()

    def __call__(self, msg):
        line = f"[{time.perf_counter() - self.t0:7.1f} s] {msg}"
        self.lines.append(line)
        if not self.quiet:
            print(line, file=sys.stderr, flush=True)


def _read_spectrum(spec):
    from .observe import apply_masks, read_spectrum

    s = read_spectrum(spec.file, air=spec.air, wave_unit=spec.wave_unit,
                      flux_unit=spec.flux_unit, columns=dict(spec.columns) or None)
    if spec.wave_range is not None:  # cut (not mask): pixels outside may lie off the grid
        keep = (s.wave >= spec.wave_range[0]) & (s.wave <= spec.wave_range[1])
        if keep.sum() < 2:
            raise ConfigError(f"keeps {int(keep.sum())} pixels of {spec.file.name}",
                              file=str(spec.file), key="wave_range", value=spec.wave_range)
        s = replace(s, wave=s.wave[keep], flux=s.flux[keep], err=s.err[keep],
                    mask=s.mask[keep])
    s = apply_masks(s, ranges=list(spec.mask), telluric=spec.telluric_mask)
    if s.n_used < 2:  # apply_masks refuses 0
        raise DataError(f"has {s.n_used} usable pixel; a spectrum needs at least 2",
                        file=str(spec.file), column="wavelength", value=s.n_used)
    if spec.rv_kms:
        # to the star's rest frame: lambda_rest = lambda_obs / (1 + v/c), first order in
        # v/c (|v| < 300 km/s gives < 1e-6 error); telluric masks act in the observed frame
        s = replace(s, wave=np.asarray(s.wave) / (1.0 + spec.rv_kms / C_KMS))
    return s


def prepare(config, grid=None, log=print, other_models=()):
    """Load data and grid, precompute the model pieces; return a :class:`Prepared`."""
    from .observe import read_photometry
    from .photosphere import load_grid

    cfg = config if not isinstance(config, (str, Path)) else load_config(config)
    grid = grid if grid is not None else load_grid(cfg.grid)
    space = ParameterSpace(cfg, grid.bounds, other_models=other_models,
                           nuisance=getattr(grid, "nuisance", ()))
    require_free_parameters(space, cfg)
    check_sampler_settings(space, cfg)
    channels = {}
    for ep in cfg.epochs:
        r_v_prior = space.prior_of("r_v", ep.label)
        chans = []
        for i, spec in enumerate(ep.spectra):
            s = _read_spectrum(spec)
            lo, hi = float(np.min(s.wave)), float(np.max(s.wave))
            if lo < grid.wave[0] or hi > grid.wave[-1]:
                raise DataError(
                    f"wavelengths {lo:.1f}-{hi:.1f} Angstrom (vacuum) reach outside the grid's "
                    f"{grid.wave[0]:.1f}-{grid.wave[-1]:.1f}; restrict them with wave_range",
                    file=str(spec.file), column="wavelength", value=(lo, hi))
            chans.append(SpectrumChannel(
                s, grid, cfg.model, r_v_prior, resolution=spec.resolution, fwhm_A=spec.fwhm_A,
                interp_error=cfg.model.interp_error,
                calibration_order=spec.calibration_order,
                calibration_sigma=spec.calibration_sigma, name=f"spectrum{i + 1}",
                mismatch=spec.mismatch))
            log(f"epoch {ep.label}: spectrum {spec.file.name}, {chans[-1].n_points} pixels used")
            for note in resolution_notes(spec, grid, s.wave):
                log(f"epoch {ep.label}: spectrum {spec.file.name}: {note}")
        if ep.photometry is not None:
            phot = read_photometry(ep.photometry)
            chans.append(PhotometryChannel(phot, grid, cfg.model, r_v_prior))
            log(f"epoch {ep.label}: photometry {ep.photometry.name}, bands {', '.join(phot.bands)}")
        channels[ep.label] = chans
    from .pipeline import hole_cautions

    for note in hole_cautions(space, grid):
        log("WARNING: " + note)
    return Prepared(cfg, grid, space, channels, Posterior(space, channels, grid))


def resolution_notes(spec, grid, wave):
    """Return what is assumed about a spectrum's line-spread function (for the log).

    Without ``resolution`` or ``fwhm_A`` none is applied: the model is compared at the
    grid's own sampling. A resolving power above the grid's -- taken as half its
    sampling ``lambda / d lambda`` over the data's range (two pixels per resolution
    element, the Nyquist rate; common practice, no source) -- cannot be matched: the
    model stays broader than the data.
    """
    from .photosphere.blackbody import BlackbodyGrid

    if spec.resolution is None and spec.fwhm_A is None:
        return ["WARNING: no resolution or fwhm_A given, so no line-spread function is "
                "applied (the model is compared at the grid's own resolution)"]
    if isinstance(grid, BlackbodyGrid):  # analytic: no lines, any resolution
        return []
    gw = np.asarray(grid.wave, float)
    lo, hi = float(np.min(wave)), float(np.max(wave))
    inside = (gw >= lo) & (gw <= hi)
    if inside.sum() < 3:
        return []
    g = gw[inside]
    r_grid = float(np.median(g[1:] / np.diff(g))) / 2.0
    r_data = (spec.resolution if spec.resolution is not None
              else float(np.median(wave)) / spec.fwhm_A)
    if r_data > r_grid:
        return [f"WARNING: resolution R = {r_data:.0f} is above the grid's (R about "
                f"{r_grid:.0f} from its sampling); no line-spread function can make the "
                "model as sharp as the data, so lines are compared broadened"]
    return []


def require_free_parameters(space, cfg):
    """Refuse a model whose parameters are all fixed: there is nothing to sample."""
    if space.ndim == 0:
        raise ConfigError("every parameter is fixed, so there is nothing to sample: give at "
                          "least one parameter a distribution (fixed: " + ", ".join(
                              f"{k}={v:g}" for k, v in space.fixed_values().items()) + ")",
                          file=str(cfg.path), key="priors", value=space.fixed_values())


def check_sampler_settings(space, cfg):
    """Refuse fewer than two walkers per free parameter, before anything is written.

    The ensemble sampler would refuse them only after the start search.
    """
    n = cfg.sampler.n_walkers
    if n < 2 * space.ndim:
        raise ConfigError(f"should be at least 2 x {space.ndim} free parameters = "
                          f"{2 * space.ndim} but got {n} (free: {', '.join(space.names)})",
                          file=str(cfg.path), key="sampler.n_walkers", value=n)


def default_out(config_path):
    """Return the run folder of ``teffmc fit CONFIG`` without ``--out``: run-<stem> beside it."""
    config_path = Path(config_path)
    return config_path.parent / f"run-{config_path.stem}"


def fit(config, out=None, *, resume=False, quiet=False, overwrite=False):
    """Run the main job on a config file; write and return the run.

    A config that declares several ``[[hypothesis]]`` variants fits each into
    ``OUT/<name>/`` and compares them in ``OUT/`` (compare.json, compare.ecsv,
    compare.png); the result returned is the best-ranked run, with ``.comparison``.

    Parameters
    ----------
    config : str or path-like or Config
    out : path-like, optional
        Run folder (default: ``run-<config name>`` beside the config).
    resume : bool
        Continue an interrupted run from ``OUT.partial/chain.h5``.
    quiet : bool
        No progress bar and no log lines on stderr.
    overwrite : bool
        Replace a run already in ``OUT`` (without it, such an ``OUT`` is refused). The
        old run stays whole until the new one is finished (see :mod:`teffmc.runfolder`).

    Raises
    ------
    ConfigError
        Also when another process is writing ``OUT`` (it holds ``OUT.lock``).
    """
    cfg = config if not isinstance(config, (str, Path)) else load_config(config)
    out = Path(out if out is not None else default_out(cfg.path)).resolve()
    check_out_folder(out)
    with run_lock(out):
        remove_leftovers(out)
        check_replace(out, overwrite=overwrite, resume=resume)
        return _fit_locked(cfg, out, resume=resume, quiet=quiet, overwrite=overwrite)


def _fit_locked(cfg, out, *, resume, quiet, overwrite):
    variants = cfg.variants()
    if len(cfg.grids) > 1 or len(variants) > 1:  # a folder of several runs
        if overwrite and not resume:
            discard(out)
        else:  # worked on again: unfinished until its marker is written anew
            (out / MARKER).unlink(missing_ok=True)
    if len(cfg.grids) > 1:
        return fit_grids(cfg, out, resume=resume, quiet=quiet)
    if len(variants) == 1:   # no hypotheses, or one: its model, fitted into ``out``
        return fit_one(variants[0][1], out, resume=resume, quiet=quiet)
    from .compare import compare_runs
    from .photosphere import load_grid

    models = [v.model for _, v in variants]
    grid = load_grid(cfg.grid)
    for _, v in variants:  # before the first variant's folder is made
        space = ParameterSpace(v, grid.bounds, other_models=models,
                               nuisance=getattr(grid, "nuisance", ()))
        require_free_parameters(space, v)
        check_sampler_settings(space, v)
    results = {}
    for name, v in variants:
        d = out / name
        partial = d.with_name(d.name + ".partial") / "chain.h5"
        if resume and not partial.exists() and is_complete(d):
            if not quiet:  # finished before the interruption: keep it
                print(f"== hypothesis {name}: already finished", file=sys.stderr)
            continue
        if not quiet:
            print(f"== hypothesis {name}", file=sys.stderr)
        results[name] = fit_one(v, d, resume=resume and partial.exists(), quiet=quiet,
                                other_models=models, hypothesis=name)
    comp = compare_runs([out / name for name, _ in variants], out, fitted=results.values())
    if not quiet:
        print(comp.text, file=sys.stderr)
    best_name = comp.rows[0]["run"]
    write_marker(out, sources=["compare.json", "compare.ecsv",
                               *[f"{name}/{MARKER}" for name, _ in variants]], best=best_name)
    if best_name in results:
        best = results[best_name]
    else:
        from .posterior import load_run

        dt, summ = load_run(out / best_name)
        best = FitResult(summary=summ, posterior=dt, out=out / best_name)
    best.comparison = comp
    return best


def grid_label(grid):
    """Return a folder-safe short name of a grid (``builtin``, ``blackbody`` or the file stem)."""
    return grid if grid in ("builtin", "blackbody") else Path(grid).stem


def fit_grids(cfg, out, *, resume=False, quiet=False):
    """Fit the same data with every grid of ``cfg.grids`` and stack them (teffmc.stacking).

    Each grid's run goes to ``OUT/grid-<name>/``; ``OUT/stack.json`` and ``OUT/stack.ecsv``
    hold the weights, each grid's intervals and the combined ones. Returns the
    highest-weight run with ``.comparison`` set to the stacking result (as stack.json).
    """
    from dataclasses import replace as _replace

    from .stacking_run import stack_runs

    labels = [grid_label(g) for g in cfg.grids]
    if len(set(labels)) != len(labels):
        raise ConfigError(f"two grids have the same name {labels}; rename a file",
                          file=str(cfg.path), key="grid", value=labels)
    results = {}
    for g, lab in zip(cfg.grids, labels):
        d = out / f"grid-{lab}"
        partial = d.with_name(d.name + ".partial") / "chain.h5"
        if resume and not partial.exists() and is_complete(d):
            continue
        if not quiet:
            print(f"== grid {lab}", file=sys.stderr)
        results[lab] = fit_one(_replace(cfg, grid=g, grids=(g,)), d,
                               resume=resume and partial.exists(), quiet=quiet)
    stack = stack_runs([out / f"grid-{lab}" for lab in labels], labels, out,
                       seed=cfg.sampler.seed)
    if not quiet:
        print(stack["text"], file=sys.stderr)
    best = max(stack["weights"], key=stack["weights"].get)
    write_marker(out, sources=["stack.json", "stack.ecsv",
                               *[f"grid-{lab}/{MARKER}" for lab in labels]],
                 best=f"grid-{best}")
    if best in results:
        res = results[best]
    else:
        from .posterior import load_run

        dt, summ = load_run(out / f"grid-{best}")
        res = FitResult(summary=summ, posterior=dt, out=out / f"grid-{best}")
    res.comparison = stack
    return res


def fit_one(config, out, *, resume=False, quiet=False, other_models=(), hypothesis=None):
    """Fit one model variant into the run folder ``out`` (see :func:`fit`)."""
    from .pipeline import finish_run, sample_posterior

    out = Path(out).resolve()
    check_out_folder(out)
    log = _Log(quiet)
    prep = prepare(config, log=log, other_models=other_models)
    cfg = prep.config
    partial = out.with_name(out.name + ".partial")
    if resume and not (partial / "chain.h5").exists():
        raise ConfigError(f"nothing to resume: {partial / 'chain.h5'} does not exist",
                          file=str(cfg.path), key="--resume")
    if not resume and partial.exists():
        shutil.rmtree(partial)
    made = [p for p in partial.parents if not p.exists()]  # folders made for it, inner first
    partial.mkdir(parents=True, exist_ok=True)
    log(f"teffmc {__version__}: fitting {cfg.path} with {prep.space.ndim} free parameters: "
        f"{', '.join(prep.space.names)}")
    try:
        # One BLAS thread: the batches are small, and threads fight over 2 cores
        # (measured 3x slower per call on a loaded 2-core machine, bench/bench_model.py).
        with threadpool_limits(limits=1):
            result = sample_posterior(prep, partial / "chain.h5", resume=resume, quiet=quiet,
                                      log=log)
        dt, summary = finish_run(prep, result, partial, log=log, hypothesis=hypothesis)
    except BaseException as exc:
        if (partial / "chain.h5").exists() or not isinstance(exc, (KeyboardInterrupt,
                                                                    TeffmcError)):
            # keep the checkpoint for --resume (or an internal error's log); the folder is
            # clearly marked partial
            (partial / "log.txt").write_text("\n".join(log.lines) + "\n", encoding="utf-8")
        else:  # interrupted or refused before the first checkpoint: nothing to resume
            shutil.rmtree(partial, ignore_errors=True)
            for p in made:
                if p.is_dir() and not any(p.iterdir()):
                    p.rmdir()
        raise
    # the marker is the run's last file; the old run (if any) stays whole until the new
    # one is in place
    finish(partial, out)
    return FitResult(summary=summary, posterior=dt, out=out)


def _fmt(v, spec):
    """``format(v, spec)``, or "n/a" for a number summary.json holds as null (NaN)."""
    return "n/a" if v is None else format(v, spec)


def summary_to_text(summary):
    """Return a few lines for the terminal: the run's summary."""
    lines = []
    if not summary["converged"]:
        lines.append(f"CAUTION: not converged ({summary['reason']}); do not quote these numbers.")
    for group in ("parameters", "derived"):
        for name, s in summary.get(group, {}).items():
            med, lo, hi = s["median"], s["p16"], s["p84"]
            if None in (med, lo, hi):  # read back from summary.json, where NaN is null
                lines.append(f"{name:>18s} = n/a")
                continue
            lines.append(f"{name:>18s} = {med:.6g} (+{hi - med:.3g} -{med - lo:.3g})  "
                         f"r_hat {_fmt(s['r_hat'], '.3f')}  ess {_fmt(s['ess_bulk'], '.0f')}")
    for key, g in summary.get("goodness_of_fit", {}).items():
        flag = "  BAD FIT" if g["chi2_nu"] is not None and g["chi2_nu"] > 2.0 else ""
        lines.append(f"fit of {key}: chi2/nu {_fmt(g['chi2_nu'], '.2f')} over "
                     f"{g['n_points']} points, rms {_fmt(g['rms_sigma'], '.2f')} sigma{flag}")
    return "\n".join(lines)
