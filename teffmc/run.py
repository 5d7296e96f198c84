"""The main job: config file -> posterior -> run folder.

Everything the user gave is read and validated before anything is written, so bad
input leaves nothing behind. The run is built in ``OUT.partial/`` (which also holds
the sampler checkpoint for ``--resume``) and renamed to ``OUT`` when complete.
"""

import json
import shutil
from dataclasses import replace
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from . import __version__
from .config import load_config
from .constants import C_KMS
from .errors import ConfigError, DataError
from .likelihood import Posterior
from .model import PhotometryChannel, SpectrumChannel
from .parameters import ParameterSpace

__all__ = ["fit", "FitResult", "prepare", "Prepared"]

RUN_FILES = ("posterior.nc", "summary.json", "summary.ecsv", "run.toml", "corner.png",
             "fit.png", "log.txt")


@dataclass
class FitResult:
    """What :func:`fit` returns: ``summary`` (dict as summary.json), ``posterior``
    (ArviZ DataTree), ``out`` (the run folder)."""

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
    space = ParameterSpace(cfg, grid.bounds, other_models=other_models)
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
        if ep.photometry is not None:
            phot = read_photometry(ep.photometry)
            chans.append(PhotometryChannel(phot, grid, cfg.model, r_v_prior))
            log(f"epoch {ep.label}: photometry {ep.photometry.name}, bands {', '.join(phot.bands)}")
        channels[ep.label] = chans
    return Prepared(cfg, grid, space, channels, Posterior(space, channels, grid))


def fit(config, out=None, *, resume=False, quiet=False):
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
    """
    cfg = config if not isinstance(config, (str, Path)) else load_config(config)
    out = Path(out) if out is not None else cfg.path.parent / f"run-{cfg.path.stem}"
    variants = cfg.variants()
    if len(variants) == 1:
        return fit_one(cfg, out, resume=resume, quiet=quiet)
    from .compare import compare_runs

    models = [v.model for _, v in variants]
    results = {}
    for name, v in variants:
        d = out / name
        partial = d.with_name(d.name + ".partial") / "chain.h5"
        if resume and not partial.exists() and (d / "summary.json").exists():
            if not quiet:  # finished before the interruption: keep it
                print(f"== hypothesis {name}: already finished", file=sys.stderr)
            continue
        if not quiet:
            print(f"== hypothesis {name}", file=sys.stderr)
        results[name] = fit_one(v, d, resume=resume and partial.exists(), quiet=quiet,
                                other_models=models, hypothesis=name)
    comp = compare_runs([out / name for name, _ in variants], out)
    if not quiet:
        print(comp.text, file=sys.stderr)
    best_name = comp.rows[0]["run"]
    if best_name in results:
        best = results[best_name]
    else:
        from .posterior import load_run

        dt, summ = load_run(out / best_name)
        best = FitResult(summary=summ, posterior=dt, out=out / best_name)
    best.comparison = comp
    return best


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
    except BaseException:
        # keep the checkpoint for --resume; the folder is clearly marked partial
        (partial / "log.txt").write_text("\n".join(log.lines) + "\n", encoding="utf-8")
        raise
    (partial / "chain.h5").unlink(missing_ok=True)
    if out.exists():
        shutil.rmtree(out)
    partial.rename(out)
    return FitResult(summary=summary, posterior=dt, out=out)


def check_out_folder(out):
    """Refuse to replace a folder that is not a teffmc run (it would be deleted)."""
    if out.exists() and any(out.iterdir()) and not (
            (out / "summary.json").exists() or (out / "posterior.nc").exists()):
        raise ConfigError("exists and is not a teffmc run folder; it would be replaced: "
                          "choose another --out", key="--out", value=str(out))


def summary_to_text(summary):
    """A few lines for the terminal."""
    lines = []
    if not summary["converged"]:
        lines.append(f"CAUTION: not converged ({summary['reason']}); do not quote these numbers.")
    for group in ("parameters", "derived"):
        for name, s in summary.get(group, {}).items():
            lines.append(f"{name:>18s} = {s['median']:.6g} (+{s['p84'] - s['median']:.3g} "
                         f"-{s['median'] - s['p16']:.3g})  r_hat {s['r_hat']:.3f}  "
                         f"ess {s['ess_bulk']:.0f}")
    for key, g in summary.get("goodness_of_fit", {}).items():
        flag = "  BAD FIT" if g["chi2_nu"] > 2.0 else ""
        lines.append(f"fit of {key}: chi2/nu {g['chi2_nu']:.2f} over {g['n_points']} points, "
                     f"rms {g['rms_sigma']:.2f} sigma{flag}")
    return "\n".join(lines)


def dumps(obj):
    return json.dumps(obj, indent=2)
