"""A 20 % flux-calibration tilt: the marginalised polynomial keeps Teff unbiased.

Noise-free spectrum (built-in grid, 0.40-0.90 um, R = 500) multiplied by 1 + 0.1 x,
x in [-1, 1] (20 % from end to end), plus BVRIJHKs photometry. Fitted once with a
2nd-order calibration polynomial (prior sigma 0.2) and once without.
"""


import pytest

from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.run import fit
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 3700.0, "logg": 0.0, "mh": 0.0, "a_v": 1.0, "r_v": 3.1, "theta": 6.0}

CONFIG = """\
grid = "builtin"
[[epoch]]
photometry = "t_phot.ecsv"
spectra = [{{ file = "t_spec.ecsv", resolution = 500.0, calibration_order = {order}, mismatch = "none" }}]
[priors]
teff = {{ dist = "uniform", low = 3300, high = 4200 }}
logg = {{ fixed = 0.0 }}
mh = {{ fixed = 0.0 }}
a_v = {{ dist = "uniform", low = 0.0, high = 4.0 }}
[sampler]
n_walkers = 16
max_steps = 10000
check_every = 250
seed = 8
"""


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("tilt")
    simulate_epoch(tmp, "t", load_grid("builtin"), ModelSpec(), TRUTH,
                   wave_range=(4000.0, 9000.0), resolution=500.0, snr=80.0, tilt=(0.1, 0.0),
                   noise=False)
    out = {}
    for label, order in (("on", 2), ("off", -1)):
        (tmp / f"{label}.toml").write_text(CONFIG.format(order=order))
        out[label] = fit(tmp / f"{label}.toml", tmp / f"run_{label}", quiet=True).summary
    return out


@pytest.mark.slow
def test_polynomial_on_recovers_teff(runs):
    st = runs["on"]["parameters"]["teff"]
    assert st["p16"] <= TRUTH["teff"] <= st["p84"], st


@pytest.mark.slow
def test_polynomial_off_is_biased(runs):
    st = runs["off"]["parameters"]["teff"]
    assert not st["p16"] <= TRUTH["teff"] <= st["p84"], st
    print(f"teff with polynomial: {runs['on']['parameters']['teff']}, without: {st}")
