"""Speed of the observation-side numerical core (not a test; prints timings).

Run: python bench/bench_observe.py
On a busy machine multi-threaded BLAS can be slower than one thread for these
small products; compare with OPENBLAS_NUM_THREADS=1.
"""

import time

import numpy as np

from teffmc.observe import BandSet, apply_lsf, legendre_design, lsf_matrix, marginal_loglike


def _best(func, repeat=5, number=1):
    """Best wall time per call [s] over ``repeat`` rounds of ``number`` calls."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            func()
        times.append((time.perf_counter() - t0) / number)
    return min(times)


def bench_bandset(n_walkers=48):
    wave = np.geomspace(3000.0, 5.0e4, 20000)
    bands = [
        "bessell-U",
        "bessell-B",
        "bessell-V",
        "bessell-R",
        "bessell-I",
        "twomass-J",
        "twomass-H",
        "twomass-Ks",
        "gaiadr3-G",
        "wise2010-W1",
    ]
    t_build = _best(lambda: BandSet(bands, "vega", wave), repeat=3)
    bs = BandSet(bands, "vega", wave)
    flux = np.random.default_rng(0).uniform(1e-13, 2e-13, size=(n_walkers, wave.size))
    t_mags = _best(lambda: bs.mags(flux), number=200)
    print(
        f"BandSet: {len(bands)} bands on {wave.size} model pixels: build {t_build * 1e3:.1f} ms; "
        f"mags for {n_walkers} walkers {t_mags * 1e6:.0f} us per call"
    )


def bench_lsf(n_models=1000, n_in=10000, n_out=3000, resolution=2000.0):
    wave_in = np.linspace(5000.0, 9000.0, n_in)
    wave_out = np.linspace(5200.0, 8800.0, n_out)
    t_build = _best(lambda: lsf_matrix(wave_in, wave_out, resolution=resolution), repeat=3)
    matrix = lsf_matrix(wave_in, wave_out, resolution=resolution)
    grid = np.random.default_rng(1).uniform(1.0, 2.0, size=(10, 10, 10, n_in))
    t_apply = _best(lambda: apply_lsf(matrix, grid), repeat=3)
    print(
        f"LSF: {n_in} -> {n_out} pixels at R={resolution:g} ({matrix.nnz} non-zeros): "
        f"build {t_build * 1e3:.1f} ms; apply to {n_models} models {t_apply * 1e3:.0f} ms"
    )


def bench_calibration(n_walkers=48, n_pix=3000, order=3):
    rng = np.random.default_rng(2)
    wave = np.linspace(5000.0, 9000.0, n_pix)
    design = legendre_design(wave, order)
    model = rng.uniform(0.9, 1.1, size=(n_walkers, n_pix))
    data, var = model[0] + rng.normal(0, 0.01, n_pix), np.full(n_pix, 1e-4)
    t = _best(lambda: marginal_loglike(data, var, model, design, 0.05), number=100)
    print(
        f"calibration marginalisation: {n_walkers} walkers x {n_pix} pixels, K={order + 1}: "
        f"{t * 1e3:.2f} ms per call"
    )


if __name__ == "__main__":
    import os

    print(
        f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}, "
        f"{os.cpu_count()} CPUs"
    )
    bench_bandset()
    bench_lsf()
    bench_calibration()
