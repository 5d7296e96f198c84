"""Competing explanations of a fade, compared on the same data (issue: epochs and hypotheses).

Data are simulated with the built-in grid at two epochs: a 50 K cooling, with or
without a fresh veil of large grains. Both hypotheses (cooling alone; cooling + veil)
are fitted and compared by PSIS-LOO.
"""

import warnings

import numpy as np
import pytest

from teffmc.budget import dimming_budget
from teffmc.config import ModelSpec
from teffmc.errors import ConvergenceWarning
from teffmc.model import Terms, band_pixels, observed_flux
from teffmc.observe import BandSet, synth_mag
from teffmc.photosphere import load_grid
from teffmc.priors import Prior
from teffmc.run import fit
from teffmc.simulate import simulate_epoch

BASE = {"logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 8.0, "veil_cover": 1.0,
        "grain_radius": 1.0}

CONFIG = """\
grid = "builtin"
shared = ["logg", "mh", "a_v", "r_v", "theta", "grain_radius"]
[model]
grid_nuisance = false
[[hypothesis]]
name = "veil"
veil = "mie"
[[hypothesis]]
name = "cooling"
veil = "none"
[[epoch]]
label = "bright"
photometry = "bright_phot.ecsv"
spectra = [{ file = "bright_spec.ecsv", resolution = 300.0, mismatch = "none" }]
[[epoch]]
label = "faint"
photometry = "faint_phot.ecsv"
spectra = [{ file = "faint_spec.ecsv", resolution = 300.0, mismatch = "none" }]
[priors]
teff = { dist = "uniform", low = 3300, high = 4000 }
logg = { fixed = 0.0 }
mh = { fixed = 0.0 }
a_v = { dist = "uniform", low = 0.0, high = 3.0 }
theta = { dist = "loguniform", low = 1.0, high = 50.0 }
"veil_tau@bright" = { fixed = 0.0 }
"veil_tau@faint" = { dist = "uniform", low = 0.0, high = 3.0 }
veil_cover = { fixed = 1.0 }
grain_radius = { dist = "loguniform", low = 0.1, high = 3.0 }
[sampler]
n_walkers = 20
max_steps = 8000
check_every = 500
seed = 5
"""


def _scenario(tmp, veil_tau_faint, seed):
    """Simulate, fit both hypotheses, return the comparison.

    Without a veil, the veil hypothesis's grain radius is unconstrained (veil_tau -> 0)
    and its chain may hit max_steps: that ConvergenceWarning is expected there and
    recorded in the comparison ("converged" column), not a failure of this test.
    """
    grid = load_grid("builtin")
    model = ModelSpec(veil="mie", grain_spread_dex=0.1)
    rng = np.random.default_rng(seed)
    for label, teff, tau in (("bright", 3650.0, 0.0), ("faint", 3600.0, veil_tau_faint)):
        simulate_epoch(tmp, label, grid, model, {**BASE, "teff": teff, "veil_tau": tau},
                       wave_range=(4000.0, 9000.0), resolution=300.0, snr=50.0, rng=rng)
    (tmp / "h.toml").write_text(CONFIG)
    with warnings.catch_warnings():
        if veil_tau_faint == 0.0:
            warnings.simplefilter("ignore", ConvergenceWarning)
        return fit(tmp / "h.toml", tmp / "run", quiet=True).comparison


def _row(comp, name):
    return next(r for r in comp.rows if r["run"] == name)


@pytest.fixture(scope="module")
def with_veil(tmp_path_factory):
    return _scenario(tmp_path_factory.mktemp("veil"), 0.7, 1)


@pytest.fixture(scope="module")
def without_veil(tmp_path_factory):
    return _scenario(tmp_path_factory.mktemp("noveil"), 0.0, 2)


@pytest.mark.slow
def test_veil_wins_by_more_than_4_se_when_there_is_a_veil(with_veil):
    assert with_veil.rows[0]["run"] == "veil"
    assert all(r["converged"] for r in with_veil.rows)
    cool = _row(with_veil, "cooling")
    assert -cool["elpd_diff"] > 4 * cool["se_diff"], cool


@pytest.mark.slow
def test_veil_does_not_win_clearly_without_a_veil(without_veil):
    veil, cool = _row(without_veil, "veil"), _row(without_veil, "cooling")
    assert veil["elpd_loo"] - cool["elpd_loo"] <= 2 * max(veil["se_diff"], cool["se_diff"])


def test_temperature_part_of_the_budget_equals_direct_v_difference():
    # DESIGN: the temperature part is V(T_b, rest of a) - V(T_a); with no veil and fixed
    # radius it must equal the direct difference of synthetic V magnitudes (to 1e-6).
    grid = load_grid("builtin")
    wave = band_pixels(grid.wave, ["bessell-V"])
    g = grid.on_pixels(wave)
    terms = Terms(wave, ModelSpec(), Prior("fixed", value=3.1))
    bands = BandSet(["bessell-V"], ["vega"], wave)

    def v_of(p):
        return bands.mags(observed_flux(g, terms, p))[:, 0]

    one = {k: np.array([v]) for k, v in {**BASE, "a_v": 0.0}.items()}
    pa, pb = {**one, "teff": np.array([3600.0])}, {**one, "teff": np.array([3550.0])}
    parts = dimming_budget(v_of, pa, pb)
    direct = (synth_mag(grid.wave, grid.interpolate(3550.0, 0.0, 0.0)[0], "bessell-V")
              - synth_mag(grid.wave, grid.interpolate(3600.0, 0.0, 0.0)[0], "bessell-V"))
    assert parts["dv_temperature"][0] == pytest.approx(direct, abs=1e-6)
    assert parts["dv_veil"][0] == 0.0 and parts["dv_radius"][0] == 0.0


@pytest.mark.xfail(strict=True, reason="the built-in grid gives 0.21 mag for 50 K near 3600 K "
                   "(tests/test_synth_vsens.py); real M-supergiant grids give ~0.4")
def test_temperature_part_of_a_50k_cooling_is_025_to_06_mag():
    # common practice, no source: ~0.4 mag in V for 50 K near 3600 K once TiO is included
    grid = load_grid("builtin")
    dv = (synth_mag(grid.wave, grid.interpolate(3550.0, 0.0, 0.0)[0], "bessell-V")
          - synth_mag(grid.wave, grid.interpolate(3600.0, 0.0, 0.0)[0], "bessell-V"))
    assert 0.25 <= dv <= 0.6, dv
