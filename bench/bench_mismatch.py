"""Benchmark: cost of the model-mismatch term and the grid nuisances per log-posterior call.

Run: ``.venv/bin/python bench/bench_mismatch.py``. The standard problem of the issue: a
4000-pixel spectrum at R 2000 + 10 bands from U to Ks, Mie veil with scattering,
calibration order 2, log g and [M/H] free, 48 walkers, one BLAS thread, built-in grid.
Prints the time per call with ``mismatch = none / white / correlated`` and with the grid
nuisances on and off, and the ratio correlated / none (the goal: <= 2).
"""

import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.run import prepare
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 3700.0, "logg": 0.5, "mh": -0.2, "a_v": 0.5, "r_v": 3.1, "theta": 5.0,
         "veil_tau": 1.0, "veil_cover": 0.5, "grain_radius": 0.5, "veil_scatter": 0.5,
         "mismatch_amp": 0.03, "mismatch_scale": 1000.0, "mismatch_white": 0.01,
         "tio_scale": 1.2, "haze_scale": 0.9}
BANDS = ["bessell-U", "bessell-B", "bessell-V", "bessell-R", "bessell-I", "twomass-J",
         "twomass-H", "twomass-Ks", "sdss2010-g", "sdss2010-r"]


def _time(fn, n=40):
    fn()
    t = time.perf_counter()
    for _ in range(n):
        fn()
    return (time.perf_counter() - t) / n * 1e3


def _prep(tmp, mismatch, nuisance):
    (tmp / f"{mismatch}{nuisance}.toml").write_text(textwrap.dedent(f"""\
        grid = "builtin"
        [model]
        veil = "mie"
        scattering = true
        grid_nuisance = {str(nuisance).lower()}
        [[epoch]]
        photometry = "b_phot.ecsv"
        spectra = [{{ file = "b_spec.ecsv", resolution = 2000.0, calibration_order = 2, telluric_mask = false, mismatch = "{mismatch}" }}]
        """))  # noqa: E501
    return prepare(tmp / f"{mismatch}{nuisance}.toml", log=lambda m: None)


def main():
    tmp = Path(tempfile.mkdtemp())
    grid = load_grid("builtin")
    # 4000 pixels at 2 per resolution element of R 2000: ln(hi/lo) = 1.0
    simulate_epoch(tmp, "b", grid, ModelSpec(veil="mie", scattering=True), TRUTH,
                   wave_range=(4000.0, 4000.0 * np.e), resolution=2000.0, bands=BANDS,
                   noise=False)
    rng = np.random.default_rng(1)
    base = None
    for nuisance in (False, True):
        for mismatch in ("none", "white", "correlated"):
            prep = _prep(tmp, mismatch, nuisance)
            x = np.array([[TRUTH.get(n, 1.0) for n in prep.space.names]] * 48)
            x *= 1 + 1e-3 * rng.normal(size=x.shape)
            with threadpool_limits(limits=1):
                ms = _time(lambda prep=prep, x=x: prep.log_post(x))
            base = ms if base is None else base
            print(f"nuisance {'on ' if nuisance else 'off'} mismatch {mismatch:10s}: "
                  f"{ms:7.2f} ms per call ({prep.space.ndim} parameters, "
                  f"{prep.channels['obs'][0].n_points} pixels)  x{ms / base:.2f}")


if __name__ == "__main__":
    main()
