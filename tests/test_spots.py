"""Hot surface spots (teffmc/components/spots.py): a second temperature above Teff.

Physics checks: the surface flux of a spotted blackbody star integrates to the
area-weighted sigma T^4 (Stefan-Boltzmann law, sigma = 5.670374419e-8 W m^-2 K^-4,
CODATA 2018; docs/references.md#radiation-laws-and-constants), and the derived bolometric
flux f_bol = (theta/2)^2 sigma <T^4> (same section) equals the model flux's integral.
"""

import textwrap

import numpy as np
import pytest

from teffmc.components import mean_t4
from teffmc.config import ModelSpec, load_config
from teffmc.derived import bolometric
from teffmc.errors import ConfigError
from teffmc.model import MAS_TO_RAD, Terms, observed_flux, surface_flux
from teffmc.parameters import ParameterSpace
from teffmc.photosphere import BlackbodyGrid, planck_surface_flux
from teffmc.priors import Prior

SIGMA_CGS = 5.670374419e-5     # erg s^-1 cm^-2 K^-4, CODATA 2018
BOUNDS = dict(BlackbodyGrid.BOUNDS)
WIDE = np.geomspace(300.0, 3.0e6, 200000)   # Angstrom: all but ~1e-5 of the flux


def _p(**kw):
    base = {"teff": 3600.0, "logg": 0.0, "mh": 0.0}
    return {k: np.atleast_1d(np.asarray(v, float)) for k, v in {**base, **kw}.items()}


def _total(f):
    return np.trapezoid(f, WIDE)       # erg s^-1 cm^-2


def test_spotted_surface_obeys_stefan_boltzmann():
    # Stefan-Boltzmann law: each part of the disc emits sigma T^4, so the disc emits
    # sigma [(1 - f) Teff^4 + f (Teff + dT)^4] (docs/references.md#radiation-laws-and-constants)
    grid = BlackbodyGrid(WIDE)
    p = _p(spot_cover=0.2, spot_dteff=500.0)
    got = _total(surface_flux(grid, p)[0])
    want = SIGMA_CGS * (0.8 * 3600.0**4 + 0.2 * 4100.0**4)
    assert got == pytest.approx(want, rel=1e-4)
    assert mean_t4(p)[0] == pytest.approx(0.8 * 3600.0**4 + 0.2 * 4100.0**4, rel=1e-14)
    # the spots brighten the star by the fraction the law gives (about +35 % here)
    plain = _total(surface_flux(grid, _p())[0])
    assert got / plain == pytest.approx(0.8 + 0.2 * (4100.0 / 3600.0) ** 4, rel=1e-4)


def test_spots_and_cool_patches_make_a_three_temperature_disc():
    # both regions by area: sigma [(1 - fc - fs) T^4 + fc Tc^4 + fs Th^4] (Stefan-Boltzmann
    # law), and f_bol of the derived quantities is the integral of the model flux at
    # Earth, (theta/2)^2 x surface (docs/references.md#radiation-laws-and-constants)
    grid = BlackbodyGrid(WIDE)
    p = _p(patch_cover=0.3, patch_dteff=400.0, spot_cover=0.1, spot_dteff=700.0, theta=8.0)
    t4 = 0.6 * 3600.0**4 + 0.3 * 3200.0**4 + 0.1 * 4300.0**4
    total = _total(surface_flux(grid, p)[0])
    assert total == pytest.approx(SIGMA_CGS * t4, rel=1e-4)
    half = 0.5 * 8.0 * MAS_TO_RAD
    f_bol = bolometric(p)["f_bol"][0]                      # W m^-2
    assert f_bol == pytest.approx(half**2 * total * 1e-3, rel=1e-4)   # erg/s/cm^2 -> W/m^2


def test_observed_flux_with_spots_is_the_plain_product():
    # the flux mix by area (not of logs) times (theta/2)^2 and the interstellar
    # transmission 10^(-0.4 A_V k) (definitions; DESIGN section 4)
    from teffmc.dust import extinction_curve

    wave = np.geomspace(4000.0, 20000.0, 300)
    grid = BlackbodyGrid(wave)
    n = 3
    p = _p(teff=[3500.0, 3600.0, 3700.0], theta=[2.0, 3.0, 4.0], a_v=[0.0, 0.5, 1.5],
           r_v=[3.1] * 3, spot_cover=[0.0, 0.15, 0.4], spot_dteff=[300.0, 500.0, 900.0])
    p["logg"], p["mh"] = np.zeros(n), np.zeros(n)
    terms = Terms(wave, ModelSpec(switches=("spots",)), Prior("fixed", value=3.1))
    got = observed_flux(grid, terms, p)
    c = p["spot_cover"][:, None]
    mix = ((1 - c) * planck_surface_flux(wave, p["teff"])
           + c * planck_surface_flux(wave, p["teff"] + p["spot_dteff"]))
    ext = 10.0 ** (-0.4 * p["a_v"][:, None] * extinction_curve("CCM89", 3.1, wave))
    half = 0.5 * p["theta"][:, None] * np.pi / 648e6
    np.testing.assert_allclose(got, half**2 * mix * ext, rtol=1e-12)
    # hotter spots make the star bluer: the blue-to-red flux ratio rises with the cover
    plain = planck_surface_flux(wave, p["teff"])
    assert (mix[1:, 0] / mix[1:, -1] > plain[1:, 0] / plain[1:, -1]).all()


def _cfg(tmp_path, body):
    (tmp_path / "p.csv").write_text("band,mag,err,system\nbessell-V,5.0,0.02,vega\n"
                                    "bessell-I,3.0,0.02,vega\n")
    (tmp_path / "c.toml").write_text('grid = "blackbody"\n' + textwrap.dedent(body)
                                     + '[[epoch]]\nlabel = "a"\nphotometry = "p.csv"\n')
    return load_config(tmp_path / "c.toml")


def test_config_switch_turns_the_spots_on(tmp_path):
    cfg = _cfg(tmp_path, "[model]\nspots = true\n")
    assert cfg.model.switches == ("spots",)
    space = ParameterSpace(cfg, BOUNDS)
    assert {"spot_cover", "spot_dteff"} <= set(space.names)
    assert space.prior_of("spot_cover").support == (0.0, 0.5)      # the declared default
    assert "spot_cover" not in ParameterSpace(_cfg(tmp_path, ""), BOUNDS).names
    with pytest.raises(ConfigError, match="model.spots"):
        _cfg(tmp_path, '[model]\nspots = "yes"\n')


def test_hypothesis_switches_the_spots_alone(tmp_path):
    cfg = _cfg(tmp_path, "[model]\npatches = true\n[[hypothesis]]\nname = \"plain\"\n"
                         "[[hypothesis]]\nname = \"spotted\"\nspots = true\n")
    models = {name: c.model for name, c in cfg.variants()}
    assert models["plain"].switches == () and models["spotted"].switches == ("spots",)
    assert models["spotted"].patches                   # the other settings kept
    cfg = _cfg(tmp_path, "[model]\nspots = true\n[[hypothesis]]\nname = \"off\"\n"
                         "spots = false\n")
    assert cfg.variants()[0][1].model.switches == ()


@pytest.mark.parametrize("prior, key", [
    ('spot_cover = { dist = "uniform", low = 0.0, high = 1.2 }', "priors.spot_cover"),
    ('spot_dteff = { dist = "uniform", low = -200.0, high = 500.0 }', "priors.spot_dteff"),
])
def test_priors_outside_the_declared_limits_are_refused(tmp_path, prior, key):
    # a covering fraction lies in [0, 1]; the spots are hotter than the photosphere
    # (their declared limits; common practice, no source)
    cfg = _cfg(tmp_path, f"[model]\nspots = true\n[priors]\n{prior}\n")
    with pytest.raises(ConfigError, match=key):
        ParameterSpace(cfg, BOUNDS)


def test_regions_beyond_the_disc_or_the_grid_are_refused(tmp_path):
    # walkers whose spots and patches cover more than the disc, or whose spot temperature
    # leaves the grid, get ln posterior -inf (the model has no such star)
    from teffmc.run import prepare

    cfg = _cfg(tmp_path, "[model]\nspots = true\npatches = true\n[priors]\n"
                         'teff = { dist = "uniform", low = 3000.0, high = 59500.0 }\n'
                         "logg = { fixed = 0.0 }\nmh = { fixed = 0.0 }\n")
    prep = prepare(cfg, log=lambda m: None)
    base = {"teff": 3600.0, "theta": 5.0, "a_v": 0.5, "patch_cover": 0.3,
            "patch_dteff": 300.0, "spot_cover": 0.3, "spot_dteff": 500.0}
    rows = [base, {**base, "patch_cover": 0.8, "spot_cover": 0.4},
            {**base, "teff": 59400.0, "spot_dteff": 800.0}]
    x = np.array([[r[n] for n in prep.space.names] for r in rows])
    lnp = prep.log_post(x)
    assert np.isfinite(lnp[0]) and lnp[1] == -np.inf and lnp[2] == -np.inf


def test_methods_text_says_the_spots_are_on():
    # the methods text names what the run's model switched on (its recorded switches)
    from teffmc.report.methods import methods_context, render_methods

    def text(switches):
        record = {"teffmc": {"provenance": {"model": {"switches": switches}}}}
        return render_methods(methods_context(record, {}), "md")[0]

    assert "Hot surface spots are included" in text(["spots"])
    assert "Hot surface spots" not in text([])
