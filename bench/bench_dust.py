"""Benchmark of the dust core: per-call cost for a batch of walkers on ~4000 pixels.

Run: ``python bench/bench_dust.py``. Prints milliseconds per call (best of repeats)
and the one-off build times (the Mie table build is cached on disk afterwards; this
script uses a throw-away cache directory so the build is measured cold).
"""

import os
import tempfile
import time

import numpy as np

N_WALKERS, N_PIX = 48, 4000


def per_call_ms(fn, repeats=5, number=20):
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        for _ in range(number):
            fn()
        best = min(best, (time.perf_counter() - t0) / number)
    return 1e3 * best


def main():
    os.environ["TEFFMC_CACHE"] = tempfile.mkdtemp(prefix="teffmc-bench-")
    from teffmc.dust import ExtinctionTable, Veil

    rng = np.random.default_rng(0)
    wave = np.linspace(3800.0, 9200.0, N_PIX)  # vacuum Angstrom
    n = N_WALKERS

    t0 = time.perf_counter()
    ext = ExtinctionTable("G23", wave, r_v_range=(2.5, 5.0))
    t_ext = time.perf_counter() - t0
    r_v = rng.uniform(2.6, 4.9, n)
    print(f"ExtinctionTable(G23, free R_V) build: {t_ext:.2f} s")
    print(f"ExtinctionTable.curve  ({n} x {N_PIX}): {per_call_ms(lambda: ext.curve(r_v)):.3f} ms")
    fixed = ExtinctionTable("G23", wave, r_v=3.1)
    r_fix = np.full(n, 3.1)
    ms = per_call_ms(lambda: fixed.curve(r_fix))
    print(f"  fixed R_V curve      ({n} x {N_PIX}): {ms:.3f} ms")

    for material in ("silicate", "corundum"):
        t0 = time.perf_counter()
        veil = Veil("mie", wave, material, 0.1)
        t_build = time.perf_counter() - t0
        t0 = time.perf_counter()
        Veil("mie", wave, material, 0.1)
        t_cached = time.perf_counter() - t0
        print(f"Veil(mie, {material}, 0.1 dex) build: {t_build:.1f} s cold, "
              f"{t_cached:.3f} s cached")
        tau, cover = rng.uniform(0, 2, n), rng.uniform(0, 1, n)
        radius, s = rng.uniform(0.05, 5.0, n), rng.uniform(0, 1, n)
        ms = per_call_ms(lambda v=veil, a=(tau, cover, radius, s): v.factor(*a))
        print(f"Veil.factor (scattering, {n} x {N_PIX}): {ms:.3f} ms")
    off = Veil("mie", wave, "silicate", 0.1, scattering=False)
    ms = per_call_ms(lambda: off.factor(tau, cover, radius))
    print(f"Veil.factor (no scattering):       {ms:.3f} ms")
    grey = Veil("grey", wave)
    ms = per_call_ms(lambda: grey.factor(tau, cover))
    print(f"Veil.factor (grey):                {ms:.3f} ms")


if __name__ == "__main__":
    main()
