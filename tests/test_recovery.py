"""Injection and recovery through the whole path: files -> fit -> run folder."""

import json
import textwrap

import numpy as np
import pytest

from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.run import RUN_FILES, fit
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 4200.0, "logg": 0.0, "mh": 0.0, "a_v": 1.2, "r_v": 3.1, "theta": 3.0}


@pytest.fixture(scope="module")
def blackbody_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("recovery")
    grid = load_grid("blackbody")
    # Noise-free data with realistic error bars: the posterior must be centred on the
    # truth (common practice, no source: an "exact" injection tests bias, not luck).
    simulate_epoch(tmp, "star", grid, ModelSpec(), TRUTH, resolution=500.0, snr=50.0,
                   noise=False)
    (tmp / "star.toml").write_text(textwrap.dedent("""\
        name = "injection test"
        grid = "blackbody"
        distance_pc = { fixed = 1000.0 }
        [[epoch]]
        photometry = "star_phot.ecsv"
        spectra = [{ file = "star_spec.ecsv", resolution = 500.0, mismatch = "none" }]
        [priors]
        teff = { dist = "uniform", low = 3000, high = 6000 }
        logg = { fixed = 0.0 }
        mh = { fixed = 0.0 }
        a_v = { dist = "uniform", low = 0.0, high = 4.0 }
        theta = { dist = "loguniform", low = 0.1, high = 100.0 }
        [sampler]
        n_walkers = 24
        max_steps = 8000
        check_every = 250
        seed = 3
        """))
    return fit(tmp / "star.toml", tmp / "run", quiet=True)


def test_run_folder_holds_every_file(blackbody_run):
    for name in RUN_FILES:
        assert (blackbody_run.out / name).is_file(), name
    s = json.loads((blackbody_run.out / "summary.json").read_text())
    for key in ("converged", "n_steps", "n_walkers", "parameters", "derived"):
        assert key in s
    assert set(s["parameters"]) == {"teff", "a_v", "theta"}
    for stats in s["parameters"].values():
        assert set(stats) >= {"median", "p16", "p84", "r_hat", "ess_bulk"}


@pytest.mark.parametrize("name", ["teff", "a_v", "theta"])
def test_truth_inside_68_interval_and_rhat(blackbody_run, name):
    s = blackbody_run.summary
    assert s["converged"], s["reason"]
    st = s["parameters"][name]
    assert st["p16"] <= TRUTH[name] <= st["p84"], st
    assert st["r_hat"] < 1.01


def test_derived_luminosity_obeys_stefan_boltzmann(blackbody_run):
    # L = 4 pi R^2 sigma Teff^4 on every draw (Stefan-Boltzmann law; sigma CODATA 2018,
    # R_sun and L_sun nominal values IAU 2015 Resolution B3)
    from teffmc import posterior

    dt = blackbody_run.posterior
    teff, r, lum = (posterior.draws(dt, n) for n in ("teff", "radius", "luminosity"))
    sigma, rsun, lsun = 5.670374419e-8, 6.957e8, 3.828e26
    np.testing.assert_allclose(lum, 4 * np.pi * (r * rsun) ** 2 * sigma * teff**4 / lsun,
                               rtol=1e-10)
