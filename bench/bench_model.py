"""Benchmark: cost of one log-posterior call for a batch of 48 walkers.

Run: ``.venv/bin/python bench/bench_model.py [--grid builtin|blackbody]``. Prints the
time per call with one BLAS thread (as the sampler runs) and with the default
threads, and the split between grid interpolation, dust and photometry.
"""

import argparse
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from teffmc.components import interstellar, veil
from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.run import prepare
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 3700.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 5.0,
         "veil_tau": 1.0, "veil_cover": 0.5, "grain_radius": 0.5}


def _time(fn, n=30):
    fn()
    t = time.perf_counter()
    for _ in range(n):
        fn()
    return (time.perf_counter() - t) / n * 1e3


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--grid", default="blackbody")
    ap.add_argument("--walkers", type=int, default=48)
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp())
    grid = load_grid(args.grid)
    model = ModelSpec(veil="mie")
    simulate_epoch(tmp, "b", grid, model, TRUTH, wave_range=(4000.0, 9000.0),
                   resolution=2000.0, noise=False)
    (tmp / "b.toml").write_text(textwrap.dedent(f"""\
        grid = "{args.grid}"
        [model]
        veil = "mie"
        [[epoch]]
        photometry = "b_phot.ecsv"
        spectra = [{{ file = "b_spec.ecsv", resolution = 2000.0 }}]
        [priors]
        logg = {{ fixed = 0.0 }}
        mh = {{ fixed = 0.0 }}
        """))
    prep = prepare(tmp / "b.toml", log=lambda m: None)
    names = prep.space.names
    x = np.array([[TRUTH.get(n, 1.0) for n in names]] * args.walkers)
    x *= 1 + 1e-4 * np.random.default_rng(1).normal(size=x.shape)
    spec = prep.channels["obs"][0]
    p = prep.space.epoch_values(x, "obs")
    st = spec.terms.states
    print(f"grid {args.grid}: {args.walkers} walkers, spectrum {spec.n_points} pixels, "
          f"photometry on {prep.channels['obs'][1].wave.size} pixels")
    with threadpool_limits(limits=1):
        print(f"  log posterior, 1 BLAS thread : {_time(lambda: prep.log_post(x)):8.2f} ms")
        print(f"  grid interpolation (spectrum): "
              f"{_time(lambda: spec.grid.interpolate(p['teff'], p['logg'], p['mh'])):8.2f} ms")
        rng = np.random.default_rng(2)   # log g and [M/H] off the nodes (all 8 corners used)
        n = args.walkers
        off = (p["teff"], rng.uniform(-0.5, 0.5, n), rng.uniform(-0.4, 0.4, n))
        if hasattr(spec.grid, "logg") and spec.grid.logg.size > 1:
            print(f"   ... log g, [M/H] off-node  : "
                  f"{_time(lambda: spec.grid.interpolate(*off)):8.2f} ms")
        print(f"  interstellar extinction      : "
              f"{_time(lambda: interstellar.log10_transmission(st['interstellar'], p)):8.2f} ms")
        print(f"  veil factor (spectrum)       : "
              f"{_time(lambda: veil.factor(st['veil'], p)):8.2f} ms")
    print(f"  log posterior, default threads: {_time(lambda: prep.log_post(x)):8.2f} ms")


if __name__ == "__main__":
    main()
