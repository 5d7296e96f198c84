"""Cross-model coverage: do Teff intervals hold the truth when the grid did not make the data?

Run: ``.venv/bin/python bench/bench_coverage.py [--n 100] [--workers 2] [--out DIR]
[--contrast]``. Each injection is an INVENTED star whose spectrum comes from a model that
differs from the fitting grid in one of the ways real stars differ from any grid:

* ``tio2`` / ``tio05`` / ``haze06``: the built-in LTE synthesis rerun at the star's exact
  Teff with the TiO band opacity x2 or x0.5, or the atomic line haze x0.6 (a new model
  atmosphere, not an interpolation);
* and, for every star, a smooth multiplicative distortion (a Matern-3/2 draw of 1-4 %
  rms over 300-5000 km/s) and perturbed line depths (the log-flux departures from a
  running continuum scaled by 1 + N(0, 0.15) per resolution element).

Stars: Teff U(3300, 4500) K, log g 0, [M/H] 0, A_V U(0.2, 1.5), theta U(1, 5) mas, R in
{1000, 2000, 3000}, S/N U(50, 200), 5000-8500 A spectrum + BVRIJHKs photometry (2 %).
With ``--grid-made`` the injections come from the fitting grid itself instead (nominal
physics, no distortions: the case the new terms must not spoil; issue acceptance: the
median interval widens by < 1.5x and 68 % coverage stays 68 +- 8 %), fitted with the terms
on and off. Fitted with the built-in grid and default settings (log g and [M/H] fixed at their true
values to keep the bench short). Prints the fraction of 68 % and 95 % Teff intervals
that hold the truth, with the mismatch and nuisance terms on (defaults) and, with
``--contrast``, off (``mismatch = "none"``, ``grid_nuisance = false``).
"""

import argparse
import json
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np

from teffmc.batch import fit_many
from teffmc.config import ModelSpec
from teffmc.errors import DataError
from teffmc.likelihood.mismatch import matern32, velocity_axis
from teffmc.photosphere import Grid, load_grid
from teffmc.photosphere.synth.build import compute_column, wave_fine
from teffmc.posterior import draws, load_run
from teffmc.simulate import simulate_epoch

PHYSICS = {"tio2": {"tio": 2.0}, "tio05": {"tio": 0.5}, "haze06": {"haze": 0.6}}


def _one_model_grid(teff, physics, base):
    """A one-node grid holding the synthesis at ``teff`` with other physics."""
    lf = compute_column(0.0, 0.0, teffs=np.array([teff]), physics=physics)[0]
    if not np.all(np.isfinite(lf)):
        return None
    return Grid([teff], [0.0], [0.0], wave_fine().copy(), lf.reshape(1, 1, 1, -1),
                name="injection")


def _distort(path, rng, resolution):
    from astropy.table import Table

    t = Table.read(path, format="ascii.ecsv")
    w = np.asarray(t["wavelength"], float)
    v = velocity_axis(w)
    amp, rho = rng.uniform(0.01, 0.04), np.exp(rng.uniform(np.log(300), np.log(5000)))
    cov = matern32(v[:, None] - v[None, :], amp, rho) + 1e-12 * np.eye(v.size)
    smooth = np.linalg.cholesky(cov) @ rng.standard_normal(v.size)
    f = np.asarray(t["flux"], float)
    # line depths: departures from a running maximum-filtered continuum, rescaled per
    # resolution element (2 pixels) by 1 + N(0, 0.15)
    from scipy.ndimage import maximum_filter1d, uniform_filter1d

    cont = uniform_filter1d(maximum_filter1d(f, 41), 41)
    depth = np.log(np.clip(f / cont, 1e-3, None))
    scale = np.repeat(1.0 + 0.15 * rng.standard_normal(v.size // 2 + 1), 2)[:v.size]
    t["flux"] = cont * np.exp(depth * scale) * (1.0 + smooth) * t["flux"].unit
    t.write(path, format="ascii.ecsv", overwrite=True)
    return {"distortion_amp": amp, "distortion_rho": rho}


CONFIG = """\
# INVENTED star (bench/bench_coverage.py): data from {kind} physics + distortions.
name = "{name}"
grid = "builtin"
[model]
{model}
[[epoch]]
photometry = "{name}_phot.ecsv"
spectra = [{{ file = "{name}_spec.ecsv", resolution = {res:.1f}{spec} }}]
[priors]
teff = {{ dist = "uniform", low = 3000, high = 4500 }}
logg = {{ fixed = 0.0 }}
mh = {{ fixed = 0.0 }}
a_v = {{ dist = "uniform", low = 0.0, high = 4.0 }}
theta = {{ dist = "loguniform", low = 0.3, high = 30.0 }}
[sampler]
seed = {seed}
"""


def make_injections(folder, n, seed, grid_made=False):
    rng = np.random.default_rng(seed)
    base = load_grid("builtin")
    truths = {}
    kinds = ["grid"] if grid_made else list(PHYSICS)
    for k in range(n):
        name = f"inj{k:03d}"
        kind = kinds[k % len(kinds)]
        teff = rng.uniform(3300.0, 4500.0)
        g = base if grid_made else _one_model_grid(teff, PHYSICS[kind], base)
        if g is None:
            continue
        res = float(rng.choice([1000.0, 2000.0, 3000.0]))
        truth = {"teff": teff, "logg": 0.0, "mh": 0.0, "a_v": rng.uniform(0.2, 1.5),
                 "r_v": 3.1, "theta": rng.uniform(1.0, 5.0)}
        sp, _ = simulate_epoch(folder, name, g, ModelSpec(), truth,
                               wave_range=(5000.0, 8500.0), resolution=res,
                               snr=rng.uniform(50.0, 200.0), rng=rng)
        extra = {} if grid_made else _distort(sp, rng, res)
        truths[name] = {**truth, "kind": kind, "resolution": res, **extra}
    return truths


def write_configs(folder, truths, contrast):
    out = []
    for i, (name, t) in enumerate(truths.items()):
        model = 'grid_nuisance = false' if contrast else ''
        spec = ', mismatch = "none"' if contrast else ''
        p = folder / f"{name}{'_off' if contrast else ''}.toml"
        p.write_text(textwrap.dedent(CONFIG.format(name=name, kind=t["kind"], model=model,
                                                   res=t["resolution"], spec=spec, seed=i + 1)),
                     encoding="utf-8")
        out.append(p)
    return out


def coverage(out, truths, suffix=""):
    hit68 = hit95 = n = conv = 0
    widths = []
    for name, t in truths.items():
        run = out / f"{name}{suffix}"
        try:
            dt, s = load_run(run)
        except DataError:      # a failed star has no run folder: counted as missing
            continue
        d = draws(dt, "teff")
        lo95, lo68, hi68, hi95 = np.percentile(d, [2.5, 16, 84, 97.5])
        n += 1
        conv += bool(s["converged"])
        hit68 += lo68 <= t["teff"] <= hi68
        hit95 += lo95 <= t["teff"] <= hi95
        widths.append(hi68 - lo68)
    return n, conv, hit68, hit95, (float(np.median(widths)) if widths else float("nan"))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=100)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--out", default=None)
    ap.add_argument("--contrast", action="store_true")
    ap.add_argument("--grid-made", action="store_true",
                    help="inject from the fitting grid itself (implies --contrast)")
    a = ap.parse_args()
    folder = Path(a.out) if a.out else Path(tempfile.mkdtemp(prefix="teffmc-coverage-"))
    folder.mkdir(parents=True, exist_ok=True)
    tfile = folder / "truths.json"
    if tfile.exists():
        truths = json.loads(tfile.read_text())
    else:
        t0 = time.time()
        truths = make_injections(folder / "data", a.n, a.seed, a.grid_made)
        tfile.write_text(json.dumps(truths, indent=1))
        print(f"{len(truths)} injections made in {time.time() - t0:.0f} s", flush=True)
    sets = [("on (defaults)", False, "")] + ([("off (contrast)", True, "_off")]
                                            if a.contrast or a.grid_made else [])
    for label, contrast, suffix in sets:
        configs = write_configs(folder / "data", truths, contrast)
        t0 = time.time()
        fit_many(configs, folder / "runs", workers=a.workers, quiet=False)
        wall = time.time() - t0
        n, conv, h68, h95, w = coverage(folder / "runs", truths, suffix)
        print(f"mismatch+nuisance {label}: {n} fits ({conv} converged) in {wall:.0f} s; "
              f"68 % intervals hold the truth in {h68}/{n} = {h68 / max(n, 1):.2f}, "
              f"95 % in {h95}/{n} = {h95 / max(n, 1):.2f}; median 68 % width {w:.0f} K",
              flush=True)


if __name__ == "__main__":
    main()
