"""Recovery of the circumstellar veil's grain size and depth (issue: dust veil).

Data simulated by the forward model with veil_tau 1, veil_cover 0.5, grain_radius
0.5 um and interstellar A_V 0.5, spectrum and photometry from 0.35 to 2.2 um
(blackbody photosphere to keep the test fast; the veil physics is the same).

The covering fraction is held at its true value in the fit: for a veil that is not
optically thick, only about cover x (1 - exp(-tau)) is constrained, and with both free
the posterior is a long curved ridge (integrated autocorrelation time ~300 steps,
measured) that takes minutes to sample -- too slow for the test suite.
"""

import textwrap

import pytest

from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.run import fit
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 3800.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 5.0,
         "veil_tau": 1.0, "veil_cover": 0.5, "grain_radius": 0.5}
BANDS = ["bessell-B", "bessell-V", "bessell-R", "bessell-I", "twomass-J",
         "twomass-H", "twomass-Ks"]


@pytest.fixture(scope="module")
def veil_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("veil")
    model = ModelSpec(veil="mie", grain_material="silicate", grain_spread_dex=0.1)
    simulate_epoch(tmp, "v", load_grid("blackbody"), model, TRUTH, wave_range=(3500.0, 22000.0),
                   resolution=300.0, snr=100.0, bands=BANDS, mag_err=0.02, noise=False)
    (tmp / "v.toml").write_text(textwrap.dedent("""\
        grid = "blackbody"
        [model]
        veil = "mie"
        grain_material = "silicate"
        grain_spread_dex = 0.1
        [[epoch]]
        photometry = "v_phot.ecsv"
        spectra = [{ file = "v_spec.ecsv", resolution = 300.0, telluric_mask = false, mismatch = "none" }]
        [priors]
        teff = { dist = "uniform", low = 3000, high = 5000 }
        logg = { fixed = 0.0 }
        mh = { fixed = 0.0 }
        a_v = { dist = "uniform", low = 0.0, high = 3.0 }
        theta = { dist = "loguniform", low = 0.5, high = 50.0 }
        veil_tau = { dist = "uniform", low = 0.0, high = 4.0 }
        veil_cover = { fixed = 0.5 }
        grain_radius = { dist = "loguniform", low = 0.05, high = 3.0 }
        [sampler]
        n_walkers = 24
        max_steps = 40000
        check_every = 500
        seed = 11
        """))
    return fit(tmp / "v.toml", tmp / "run", quiet=True)


@pytest.mark.slow
@pytest.mark.parametrize("name", ["grain_radius", "veil_tau", "a_v"])
def test_veil_parameters_recovered(veil_run, name):
    st = veil_run.summary["parameters"][name]
    assert st["p16"] <= TRUTH[name] <= st["p84"], (name, st)
