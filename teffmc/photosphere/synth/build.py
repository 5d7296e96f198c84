"""Single-model flux and the built-in grid (``teffmc grid build``).

The grid is computed column by column: for each (log g, [M/H]) the models run from the
hottest to the coolest Teff, each one starting from the previous converged T(tau) scaled
by the Teff ratio. The column order is fixed, so the result does not depend on how the
columns are shared between worker processes: the same inputs give the same flux bytes
and therefore the same checksum.
"""

import os
import time

import numpy as np

from ...errors import GridError
from . import bands
from .atmosphere import (
    H_ODF,
    LOGTAU,
    M_ODF,
    R_FINE,
    W_ODF,
    _opacity,
    flux_of,
    model_atmosphere,
    wave_fine,
    wave_full,
)
from .constants import SIGMA
from .opacity import Opacity

__all__ = [
    "ENERGY_TOL",
    "LOGG",
    "MH",
    "TEFF",
    "bolometric_deviation",
    "build_grid",
    "compute_column",
    "surface_flux",
]

TEFF = np.concatenate([np.arange(2600.0, 4501.0, 100.0), np.arange(4750.0, 7001.0, 250.0)])
LOGG = np.arange(-1.0, 5.01, 1.0)
MH = np.array([-1.0, -0.5, 0.0, 0.5])
ENERGY_TOL = 0.03          # |F_bol / (sigma Teff^4) - 1| allowed for a grid node


def _check_wave(wave_A):
    w = np.asarray(wave_A, float)
    if w.ndim != 1 or w.size < 2 or not np.all(np.isfinite(w)):
        raise GridError(f"wave_A should be a finite 1-D array but got shape {w.shape}")
    if w[0] <= 0 or np.any(np.diff(w) <= 0):
        raise GridError(f"wave_A should be positive and strictly increasing but starts at "
                        f"{w[0]!r}")
    return w


def surface_flux(teff, logg, mh, wave_A, **kw):
    """Surface F_lambda [erg s^-1 cm^-2 A^-1] of one model at vacuum wavelengths wave_A.

    The model structure is converged on the internal wavelength grid; the formal solution
    is then evaluated directly at ``wave_A`` (no interpolation of a spectrum).
    """
    w = _check_wave(wave_A)
    atm = model_atmosphere(teff, logg, mh, **kw)
    return flux_of(atm, Opacity(w))


def bolometric_deviation(wave, flux, teff):
    """F_bol / (sigma Teff^4) - 1 for a flux on :func:`wave_full` (0.1-200 um).

    Beyond the red end the Rayleigh-Jeans tail F ∝ lambda^-4 adds F_end lambda_end / 3;
    the part blueward of 0.1 um is neglected (< 1e-5 of the total below 7000 K for a
    blackbody).
    """
    fb = np.sum(0.5 * (flux[1:] + flux[:-1]) * np.diff(wave)) + flux[-1] * wave[-1] / 3.0
    return fb / (SIGMA * teff**4) - 1.0


def compute_column(logg, mh, teffs=None, physics=None):
    """Models along Teff (hot to cool) at one (logg, mh).

    ``physics``: ``{"tio": s, "haze": s}`` opacity scale factors (default nominal).

    Returns (log_flux float32 (n_teff, n_fine), deviation (n_teff,), iterations,
    flux_error) in ascending Teff order.
    """
    with bands.physics(**(physics or {})):
        return _compute_column(logg, mh, teffs)


def _compute_column(logg, mh, teffs):
    teffs = TEFF if teffs is None else np.asarray(teffs, float)
    full = _opacity("full")
    wf = wave_full()
    fine = np.searchsorted(wf, wave_fine()[0])
    nfine = wave_fine().size
    out = np.full((teffs.size, nfine), np.nan, np.float32)
    dev = np.full(teffs.size, np.nan)
    its = np.zeros(teffs.size, int)
    ferr = np.full(teffs.size, np.nan)
    prev = None
    for i in np.argsort(teffs)[::-1]:
        t = teffs[i]
        start = None if prev is None else prev[1] * (t / prev[0])
        try:
            atm = model_atmosphere(t, logg, mh, T_start=start)
        except (np.linalg.LinAlgError, FloatingPointError, ValueError):
            prev = None
            continue
        f = flux_of(atm, full)
        if not np.all(np.isfinite(f)) or np.any(f <= 0):
            prev = None
            continue
        prev = (t, atm.T)
        dev[i] = bolometric_deviation(wf, f, t)
        its[i], ferr[i] = atm.iterations, atm.flux_error
        out[i] = np.log10(f[fine:fine + nfine]).astype(np.float32)
    return out, dev, its, ferr


#: the built-in grid's nuisance axes: (name, ln step h, prior low, prior high, note). The
#: grid is recomputed with the opacity scaled by e^-h and e^h (teffmc.photosphere.nuisance).
NUISANCE = (
    ("tio", float(np.log(2.0)), 0.5, 2.0,
     "scale of the TiO band opacity (all systems): published band oscillator strengths "
     "of the TiO systems differ by up to a factor ~2 between laboratory and theoretical "
     "determinations (from memory); prior log-uniform 0.5-2"),
    ("haze", float(np.log(2.0)), 0.5, 2.0,
     "scale of the statistical atomic line haze: its amplitude was calibrated on solar "
     "colours only, and line blanketing of cool giants differs by tens of per cent to a "
     "factor ~2 between line lists and codes (from memory); prior log-uniform 0.5-2"),
)


def _compute_cube(teff, logg, mh, workers, progress, physics):
    """Every model of the grid with the given opacity scales: (log_flux, dev, iterations)."""
    tasks = [(float(g), float(m)) for g in logg for m in mh]
    t0 = time.time()
    if workers == 1:
        results = []
        for k, tsk in enumerate(tasks):
            results.append(compute_column(*tsk, teffs=teff, physics=physics))
            if progress:
                print(f"column {k + 1}/{len(tasks)} done, {time.time() - t0:.0f} s", flush=True)
    else:
        import multiprocessing as mp
        from functools import partial
        saved = {k: os.environ.get(k) for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS",
                                                  "MKL_NUM_THREADS")}
        os.environ.update({k: "1" for k in saved})       # one BLAS thread per worker
        try:
            with mp.get_context("spawn").Pool(workers) as pool:
                results = []
                for k, r in enumerate(pool.imap(partial(_column_args, teff=teff, physics=physics),
                                                tasks)):
                    results.append(r)
                    if progress:
                        print(f"column {k + 1}/{len(tasks)} done, {time.time() - t0:.0f} s",
                              flush=True)
        finally:
            for k, v in saved.items():
                if v is None:
                    os.environ.pop(k, None)
                else:
                    os.environ[k] = v
    nw = wave_fine().size
    lf = np.full((teff.size, logg.size, mh.size, nw), np.nan, np.float32)
    dev = np.full((teff.size, logg.size, mh.size), np.nan)
    its = np.zeros((teff.size, logg.size, mh.size), int)
    for (g, m), (o, d, it, _fe) in zip(tasks, results):
        j, k = int(np.argmin(abs(logg - g))), int(np.argmin(abs(mh - m)))
        lf[:, j, k], dev[:, j, k], its[:, j, k] = o, d, it
    lf[~(np.abs(dev) <= ENERGY_TOL)] = np.nan
    return lf, dev, its


def _nuisance_axes(teff, logg, mh, workers, progress):
    from ..nuisance import NuisanceAxis

    axes = []
    for name, h, low, high, note in NUISANCE:
        cubes = []
        for sign in (-1.0, 1.0):
            if progress:
                print(f"nuisance {name}: scale e^{sign * h:+.3f}", flush=True)
            cubes.append(_compute_cube(teff, logg, mh, workers, progress,
                                       {name: float(np.exp(sign * h))})[0])
        axes.append(NuisanceAxis(name, h, cubes[0], cubes[1], low, high, note))
    return tuple(axes)


def build_grid(out_path, *, workers=2, teff=None, logg=None, mh=None, progress=False,
               physics=None, nuisance=True):
    """Compute the built-in photosphere grid and write it to ``out_path`` (HDF5).

    Nodes whose emergent flux misses sigma Teff^4 by more than ENERGY_TOL (or that fail)
    are stored as NaN (missing nodes) and listed in the provenance. With ``nuisance`` the
    grid is also recomputed for every axis of :data:`NUISANCE` (4 more grids) and the
    axes are stored in the file. Returns the Grid.
    """
    from ..grid import Grid

    teff = TEFF if teff is None else np.asarray(teff, float)
    logg = LOGG if logg is None else np.asarray(logg, float)
    mh = MH if mh is None else np.asarray(mh, float)
    if not (isinstance(workers, int) and workers >= 1):
        raise GridError(f"workers should be a positive integer but got {workers!r}")
    t0 = time.time()
    lf, dev, its = _compute_cube(teff, logg, mh, workers, progress, physics)
    axes = _nuisance_axes(teff, logg, mh, workers, progress) if nuisance else ()
    bad = ~(np.abs(dev) <= ENERGY_TOL)
    holes = [f"({teff[i]:g},{logg[j]:g},{mh[k]:g})" for i, j, k in np.argwhere(bad)]
    good = ~bad
    prov = {
        "origin": "computed by teffmc.photosphere.synth (teffmc's own approximate LTE "
                  "plane-parallel model atmospheres; see its module docstrings)",
        "physics": "LTE, plane-parallel, radiative equilibrium (Unsoeld-Lucy correction from "
                   "a grey Hopf-function start), hydrostatic equilibrium (gas pressure only), "
                   "Saha + molecular equilibrium (H, H-, H2, CO, OH, H2O, TiO), H-/H bf+ff, "
                   "Rayleigh H/H2, Thomson (scattering as absorption), smeared TiO/H2O/CO "
                   "bands, statistical Fe-proxy line haze, 3-step opacity distribution",
        "approximate": "yes: for publication-grade temperatures import a validated grid",
        "wavelength": f"vacuum, log-uniform, R_pix = {R_FINE:g}, "
                      f"{wave_fine()[0]:.1f}-{wave_fine()[-1]:.1f} A",
        "depth_grid": f"log10 tau_Ross {LOGTAU[0]:g}..{LOGTAU[-1]:g}, {LOGTAU.size} points",
        "odf": f"weights {W_ODF.tolist()}, molecular multipliers "
               f"{np.round(M_ODF, 4).tolist()}, haze multipliers {np.round(H_ODF, 4).tolist()}",
        "energy_check": "F_bol = int F_lambda over 0.1-200 um + Rayleigh-Jeans tail, "
                        "compared with sigma Teff^4, no rescaling",
        "energy_max_abs_deviation": f"{np.nanmax(np.abs(dev[good])) if good.any() else np.nan:.5f}",
        "energy_tolerance": f"{ENERGY_TOL:g}",
        "models": f"{int(good.sum())} of {good.size}",
        "missing_nodes": ";".join(holes) if holes else "none",
        "iterations_max": f"{int(its.max())}",
    }
    for a in axes:
        prov[f"nuisance_{a.name}"] = a.note
    grid = Grid(teff=teff, logg=logg, mh=mh, wave=wave_fine().copy(), log_flux=lf,
                provenance=prov, name="teffmc-builtin-lte", nuisance=axes)
    grid.write(out_path)
    if progress:
        print(f"wrote {out_path}: {time.time() - t0:.0f} s, max |dev| "
              f"{prov['energy_max_abs_deviation']}, holes {len(holes)}", flush=True)
    return grid


def _column_args(task, teff, physics=None):
    return compute_column(task[0], task[1], teffs=teff, physics=physics)
