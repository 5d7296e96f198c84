"""Survey throughput: wall time per star of ``teffmc batch`` with 1 and 2 workers.

Usage::

    python bench/bench_batch.py [--stars 8] [--workers 1 2] [--out FOLDER]

Simulates ``--stars`` invented stars (Teff 3400-4200 K, A_V 0.3-1.5, noise drawn) with the
built-in grid: seven bands of photometry and one short spectrum (6000-7500 A, R = 1000,
S/N 50), and fits them with the default config (default priors and sampler settings; only
the data files and a Teff prior of 3000-4500 K are given) through
:func:`teffmc.fit_many`, once per worker count, each time from scratch. Prints, per
worker count, the wall time of the whole batch, the wall time per star (batch / stars),
the mean time of one fit inside its worker, stars per hour, and how many converged.

Measured (2-core machine, shared; 8 stars): see README.md, section "Many stars".
"""

import argparse
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np

def main():
    from teffmc import fit_many
    from teffmc.simulate import simulate_survey

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stars", type=int, default=8)
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--out", help="keep the stars and runs here (default: a temporary folder)")
    args = ap.parse_args()
    root = Path(args.out) if args.out else Path(tempfile.mkdtemp(prefix="bench_batch_"))
    root.mkdir(parents=True, exist_ok=True)
    configs = simulate_survey(root / "stars", args.stars)
    print(f"{args.stars} simulated stars in {root / 'stars'}")
    print(f"{'workers':>7} {'batch [s]':>10} {'per star [s]':>13} {'one fit [s]':>12} "
          f"{'stars/hour':>11} {'converged':>10}")
    for w in args.workers:
        out = root / f"runs_w{w}"
        shutil.rmtree(out, ignore_errors=True)
        t0 = time.perf_counter()
        t = fit_many(configs, out, workers=w)
        wall = time.perf_counter() - t0
        fits = np.asarray(t["wall_time_s"], dtype=float)
        print(f"{w:>7d} {wall:>10.1f} {wall / len(t):>13.1f} {np.nanmean(fits):>12.1f} "
              f"{3600.0 * len(t) / wall:>11.0f} {int(np.sum(t['status'] == 'ok')):>6d}/"
              f"{len(t)}")
        failed = t[t["status"] == "failed"]
        for r in failed:
            print(f"   failed: {r['star']}: {r['reason']}")
    if not args.out:
        shutil.rmtree(root)


if __name__ == "__main__":
    main()
