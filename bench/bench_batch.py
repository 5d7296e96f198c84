"""Survey throughput on Dask: wall time per star of ``teffmc batch`` with 1 and 2 workers,
parallel efficiency, the engine's overhead per star, peak memory per worker.

Usage::

    python bench/bench_batch.py [--stars 50] [--kind small|survey|survey-defaults]
                                [--workers 1 2] [--scheduler ADDRESS] [--out FOLDER]
                                [--format png,csv,html]
    python bench/bench_batch.py --stars 1000 --kind survey --workers 2   # the large survey

Kinds of simulated INVENTED stars (noise drawn, one seed each):

- ``small``: the blackbody grid, seven bands and a 4500-9000 A spectrum at R = 100 made by
  that grid (``mismatch = "none"``), Teff and A_V free, 16 walkers: a few seconds a star
  (the stars of tests/test_batch.py);
- ``survey``: :func:`teffmc.simulate.simulate_survey` -- the built-in grid, seven bands
  and a 6000-7500 A spectrum at R = 1000 made by that grid, default priors and sampler,
  the mismatch term and the grid nuisances off (the data are the grid's own): 5 free
  parameters (teff, logg, mh, theta, a_v); ``--format png,csv,html`` sets the report
  files each star writes (default all);
- ``survey-defaults``: the same stars with every default (10 free parameters: the
  mismatch term's three and the two grid nuisances added).

Each worker count fits all stars from scratch through :func:`teffmc.fit_many` (an
embedded ``LocalCluster``, or the cluster at ``--scheduler``). Printed per worker count:
the batch's wall time (cluster start included), per star, the mean fit time inside the
workers, stars per hour, the fraction converged, the peak memory (max RSS) per worker; then
the parallel efficiency T1 / (n T_n), the workers' utilisation (sum of fit times / (workers
x wall): below 1 only by the engine's idle time and cluster start, whatever the machine's
load, while T1 / (n T_n) also drops when other programs take the cores) with the CPU time
per star (the efficiency expected on free cores is U_n / U_1 x CPU_1 / CPU_n), and the
engine's
overhead per star, read from
``batch-engine.json``: the idle time of a worker between the end of one star and the start
of the next (Dask's scheduling and result transfer) plus the time inside the task outside
the fit, as a fraction of the mean fit time.

Measured: see README.md, section "Surveys on a cluster".
"""

import argparse
import json
import os
import shutil
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np

_SMALL = """\
# INVENTED star {name} (simulated by bench/bench_batch.py; not a real star).
# Truth: teff = {teff:.1f} K, a_v = {a_v:.3f}.
grid = "blackbody"
[[epoch]]
photometry = "{name}_phot.ecsv"
spectra = [{{ file = "{name}_spec.ecsv", resolution = 100.0, mismatch = "none" }}]
[priors]
teff = {{ dist = "uniform", low = 3000, high = 6000 }}
logg = {{ fixed = 0.0 }}
mh = {{ fixed = 0.0 }}
theta = {{ fixed = 2.0 }}
[sampler]
n_walkers = 16
max_steps = 3000
min_steps = 200
check_every = 200
n_starts = 4
seed = {seed}
"""


def small_stars(folder, n, seed=1):
    """``n`` small invented stars (blackbody grid, Teff and A_V free)."""
    from teffmc.config import ModelSpec
    from teffmc.photosphere import load_grid
    from teffmc.simulate import simulate_epoch

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    grid = load_grid("blackbody")
    rng = np.random.default_rng(seed)
    configs = []
    for k in range(n):
        name = f"star{k + 1:04d}"
        truth = {"teff": rng.uniform(3400.0, 4600.0), "logg": 0.0, "mh": 0.0,
                 "a_v": rng.uniform(0.3, 1.5), "r_v": 3.1, "theta": 2.0}
        simulate_epoch(folder, name, grid, ModelSpec(), truth, resolution=100.0,
                       wave_range=(4500.0, 9000.0), rng=rng)
        path = folder / f"{name}.toml"
        path.write_text(textwrap.dedent(_SMALL).format(name=name, seed=k + 1, **truth))
        configs.append(path)
    return configs


def engine_numbers(out):
    """Overhead per star, startup, peak memory per worker from ``batch-engine.json``."""
    rep = json.loads((Path(out) / "batch-engine.json").read_text())
    stars = rep["stars"]
    fits = np.array([s["fit"] for s in stars.values() if s["fit"] is not None])
    inside = np.array([s["stop"] - s["start"] - s["fit"] for s in stars.values()
                       if s["fit"] is not None])
    gaps = np.concatenate([w["gaps_s"] for w in rep["workers"].values()] or [[]])
    first = min(s["start"] for s in stars.values())
    cpu = np.array([s["cpu"] for s in stars.values() if s.get("cpu") is not None])
    return {"mean_fit": float(fits.mean()), "sum_fit": float(fits.sum()),
            "cpu": float(cpu.mean()),
            "n_workers": len(rep["workers"]),
            "gap": float(gaps.mean()) if gaps.size else float("nan"),
            "inside": float(inside.mean()),
            "startup": first - rep["submitted"],
            "peak_mb": {w: v["peak_rss_mb"] for w, v in rep["workers"].items()},
            "caches": {w: v.get("caches", {}) for w, v in rep["workers"].items()}}


def make_stars(args, folder):
    """The configs of ``args.stars`` stars of ``args.kind`` in ``folder``."""
    from teffmc.simulate import simulate_survey

    if args.kind == "small":
        return small_stars(folder, args.stars)
    formats = None if args.format is None else [f for f in args.format.split(",") if f]
    return simulate_survey(folder, args.stars, formats=formats,
                           terms=args.kind == "survey-defaults")


def parse_args():
    """The command line."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stars", type=int, default=50)
    ap.add_argument("--kind", choices=("small", "survey", "survey-defaults"), default="small")
    ap.add_argument("--format", default=None,
                    help="[report] formats of the survey stars, comma-separated (default: "
                    "all report files)")
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--scheduler", help="attach to this Dask scheduler (once, instead of "
                    "--workers)")
    ap.add_argument("--out", help="keep the stars and runs here (default: a temporary folder)")
    return ap.parse_args()


def main():
    from teffmc import fit_many

    args = parse_args()
    root = Path(args.out) if args.out else Path(tempfile.mkdtemp(prefix="bench_batch_"))
    root.mkdir(parents=True, exist_ok=True)
    configs = make_stars(args, root / "stars")
    print(f"{args.stars} simulated stars ({args.kind}) in {root / 'stars'}")
    print(f"{'workers':>9} {'batch [s]':>10} {'per star [s]':>13} {'one fit [s]':>12} "
          f"{'stars/hour':>11} {'converged':>10} {'overhead':>9} {'peak MB/worker':>15}")
    runs = [(None, args.scheduler)] if args.scheduler else [(w, None) for w in args.workers]
    walls, cpus = {}, {}
    for w, sched in runs:
        out = root / f"runs_w{w or 'cluster'}"
        shutil.rmtree(out, ignore_errors=True)
        load0 = os.getloadavg()[0]
        t0 = time.perf_counter()
        t = fit_many(configs, out, workers=w, scheduler=sched)
        wall = time.perf_counter() - t0
        load = (load0, os.getloadavg()[0])
        walls[w] = wall
        e = engine_numbers(out)
        overhead = (e["gap"] + e["inside"]) / e["mean_fit"]
        conv = int(np.sum(t["status"] == "ok"))
        peak = max(e["peak_mb"].values())
        label = str(w) if w else "cluster"
        print(f"{label:>9} {wall:>10.1f} {wall / len(t):>13.2f} {e['mean_fit']:>12.2f} "
              f"{3600.0 * len(t) / wall:>11.0f} {conv:>5d}/{len(t):<4d} "
              f"{100 * overhead:>8.2f}% {peak:>15.0f}")
        print(f"{'':>9} engine: cluster start to first star {e['startup']:.2f} s; per star: "
              f"idle between stars {1000 * e['gap']:.1f} ms, in the task outside the fit "
              f"{1000 * e['inside']:.1f} ms; fraction converged {conv / len(t):.3f}; "
              f"machine load average {load[0]:.1f} at start, {load[1]:.1f} at end "
              f"({os.cpu_count()} cores)")
        util = e["sum_fit"] / (e["n_workers"] * wall)
        cpus[w] = (util, e["cpu"])
        print(f"{'':>9} workers busy fitting {util:.3f} of the batch's wall time (sum of fit "
              f"times / (workers x wall)); CPU time per star {e['cpu']:.2f} s")
        for worker, caches in e["caches"].items():
            text = ", ".join(f"{k} {h}/{u}" for k, (h, u) in caches.items())
            print(f"{'':>9} {worker}: peak {e['peak_mb'][worker]:.0f} MB; caches "
                  f"(hits/uses): {text}")
        for r in t[t["status"] == "failed"]:
            print(f"   failed: {r['star']}: {r['reason']}")
    if 1 in walls:
        for w, wall in walls.items():
            if w and w > 1:
                print(f"parallel efficiency T1 / ({w} T{w}) = {walls[1] / (w * wall):.3f}")
                # on free cores a star costs the same CPU time in every worker: the wall
                # time then scales with CPU time per star / utilisation
                est = (cpus[w][0] / cpus[1][0]) * (cpus[1][1] / cpus[w][1])
                print(f"  expected on {w} free cores (utilisation and CPU time per star "
                      f"as measured): {est:.3f}")
    if not args.out:
        shutil.rmtree(root)


if __name__ == "__main__":
    main()
