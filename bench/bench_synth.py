"""Benchmark of the built-in grid synthesis: time per model and the whole-build estimate.

Usage: python bench/bench_synth.py [--columns N]
Runs N (log g, [M/H]) columns of the grid (hot -> cool with warm starts, as the build
does) in this single process and extrapolates to the full grid on 2 workers.
"""

import argparse
import os
import time

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np

from teffmc.photosphere.synth import atmosphere as atm_mod
from teffmc.photosphere.synth.build import LOGG, MH, TEFF, compute_column


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--columns", type=int, default=2)
    ap.add_argument("--workers", type=int, default=2)
    a = ap.parse_args()
    t0 = time.perf_counter()
    atm_mod.rosseland_table(0.0)
    atm_mod._opacity("work")
    atm_mod._opacity("full")
    setup = time.perf_counter() - t0
    cols = [(-1.0, 0.0), (5.0, 0.0), (0.0, -1.0), (3.0, 0.5)][: a.columns]
    per = []
    for g, m in cols:
        t = time.perf_counter()
        _, dev, its, _ = compute_column(g, m)
        dt = time.perf_counter() - t
        per.append(dt / TEFF.size)
        print(f"column log g {g:+.0f} [M/H] {m:+.1f}: {dt:6.1f} s, {dt / TEFF.size:.2f} s/model, "
              f"iterations {its.min()}-{its.max()}, max |F_bol dev| {np.nanmax(abs(dev)):.4f}")
    n = TEFF.size * LOGG.size * MH.size
    mean = float(np.mean(per))
    est = n * mean / a.workers + MH.size * setup
    print(f"setup (tables, per [M/H] per worker): {setup:.1f} s")
    print(f"mean time per model: {mean:.2f} s; {n} models on {a.workers} workers: "
          f"~{est / 60:.1f} min")


if __name__ == "__main__":
    main()
