"""Forward-model pieces: photometry pixels, dust factor wiring, patches."""

import numpy as np
import pytest

from teffmc.config import ModelSpec
from teffmc.model import PhotometryChannel, observed_flux, surface_flux
from teffmc.observe import synth_mag
from teffmc.observe.photometry import make_photometry
from teffmc.photosphere import BlackbodyGrid, Grid
from teffmc.priors import Prior

BANDS = ["bessell-B", "bessell-V", "bessell-I", "twomass-J", "twomass-Ks"]


def _lined_grid(rng):
    """A grid with dense random absorption lines at lambda/dlambda = 3000 (test numbers)."""
    wave = np.exp(np.arange(np.log(3000.0), np.log(30000.0), 1 / 3000.0))
    bb = BlackbodyGrid(wave)
    teff = np.array([3500.0, 3700.0])
    lf = np.empty((2, 1, 1, wave.size))
    centres = rng.uniform(3000, 30000, 4000)
    depth = np.zeros(wave.size)
    for c in centres:
        depth += 0.5 * np.exp(-0.5 * ((wave - c) / (c / 4000)) ** 2)
    for i, t in enumerate(teff):
        lf[i, 0, 0] = np.log10(bb.interpolate(t, 0.0, 0.0)[0] * np.exp(-depth))
    return Grid(teff, [0.0], [0.0], wave, lf, name="lined test grid")


def test_coarse_photometry_pixels_match_native_synthetic_mags(rng):
    # The photometry channel takes hat-weighted means of the grid on lambda/dlambda = 700
    # pixels; synthetic magnitudes must stay within 1e-3 mag of the native-resolution
    # integral (tolerance: the speed issue's bound, well below photometric errors; common
    # practice, no source).
    grid = _lined_grid(rng)
    phot = make_photometry(BANDS, np.zeros(5), np.full(5, 0.02), ["vega"] * 5)
    ch = PhotometryChannel(phot, grid, ModelSpec(), Prior("fixed", value=3.1))
    assert ch.wave.size < grid.wave.size / 4
    p = {"teff": np.array([3600.0]), "logg": np.zeros(1), "mh": np.zeros(1),
         "theta": np.array([10.0]), "a_v": np.array([0.7]), "r_v": np.array([3.1])}
    got = ch.predict(p)[0]
    from teffmc.model import Terms

    native = observed_flux(grid, Terms(grid.wave, ModelSpec(), Prior("fixed", value=3.1)), p)[0]
    want = [synth_mag(grid.wave, native, b, "vega") for b in BANDS]
    np.testing.assert_allclose(got, want, atol=1e-3)


def test_coarse_photometry_on_the_builtin_grid_within_a_millimag(monkeypatch):
    """Over the whole grid, U to Ks (the grid's blue edge inside the U band), extinction up to
    A_V = 6 with R_V 2.5-5, a Mie veil with scattering and the grid-physics nuisances:
    every band within 1 mmag of the integral on the grid's own pixels (the speed issue's
    bound; common practice, no source)."""
    import teffmc.model as model_module
    from teffmc.photosphere import load_grid

    grid = load_grid("builtin")
    bands = ["bessell-U", "bessell-B", "bessell-V", "bessell-R", "bessell-I", "sdss2010-g",
             "twomass-J", "twomass-H", "twomass-Ks"]
    phot = make_photometry(bands, np.zeros(9), np.full(9, 0.02), ["vega"] * 9)
    spec = ModelSpec(veil="mie", scattering=True)
    r_v = Prior("uniform", low=2.0, high=6.0)
    rng = np.random.default_rng(5)
    n = 200
    b = grid.bounds             # the whole grid: the deepest TiO bands are at its cool end
    p = {"teff": rng.uniform(*b["teff"], n), "logg": rng.uniform(*b["logg"], n),
         "mh": rng.uniform(*b["mh"], n), "theta": np.full(n, 2.0),
         "a_v": rng.uniform(0.0, 6.0, n), "r_v": rng.uniform(2.5, 5.0, n),
         "veil_tau": rng.uniform(0.0, 3.0, n), "veil_cover": rng.uniform(0.0, 1.0, n),
         "grain_radius": 10 ** rng.uniform(-1.5, 0.0, n), "veil_scatter": rng.uniform(0, 1, n),
         "tio_scale": np.exp(rng.uniform(-0.69, 0.69, n)),
         "haze_scale": np.exp(rng.uniform(-0.69, 0.69, n))}
    coarse = PhotometryChannel(phot, grid, spec, r_v)
    monkeypatch.setattr(model_module, "PHOT_PIXEL_R", 1e9)      # the grid's own pixels
    native = PhotometryChannel(phot, grid, spec, r_v)
    assert coarse.wave.size < native.wave.size / 2.5
    err = np.abs(coarse.predict(p) - native.predict(p))
    assert np.all(np.isfinite(err))
    assert err.max() < 1e-3, dict(zip(bands, err.max(axis=0)))


def test_cool_patches_mix_two_temperatures():
    grid = BlackbodyGrid(np.geomspace(4000, 9000, 50))
    p = {"teff": np.array([3600.0]), "logg": np.zeros(1), "mh": np.zeros(1),
         "patch_cover": np.array([0.3]), "patch_dteff": np.array([400.0])}
    f = surface_flux(grid, p)[0]
    want = 0.7 * grid.interpolate(3600.0, 0, 0)[0] + 0.3 * grid.interpolate(3200.0, 0, 0)[0]
    np.testing.assert_allclose(f, want, rtol=1e-12)


def test_angular_diameter_scaling():
    # F_obs = (theta/2)^2 F_surf (definition of the angular diameter; 1 mas = pi/648e6 rad)
    from teffmc.model import Terms

    grid = BlackbodyGrid(np.geomspace(4000, 9000, 20))
    p = {"teff": np.array([5000.0]), "logg": np.zeros(1), "mh": np.zeros(1),
         "theta": np.array([2.0]), "a_v": np.zeros(1), "r_v": np.array([3.1])}
    f = observed_flux(grid, Terms(grid.wave, ModelSpec(), Prior("fixed", value=3.1)), p)[0]
    half = 1.0 * np.pi / 648e6
    np.testing.assert_allclose(f, half**2 * grid.interpolate(5000.0, 0, 0)[0], rtol=1e-12)
    assert pytest.approx(np.pi / 648e6) == np.deg2rad(1 / 3.6e6)


@pytest.mark.parametrize("patches", [False, True])
def test_observed_flux_is_the_plain_product(rng, patches):
    # observed_flux sums logs and exponentiates once; it must equal the textbook product
    # (theta/2)^2 F_surf 10^(-0.4 A_V a(lambda)) x veil (definitions; DESIGN section 4)
    from teffmc.dust import extinction_curve
    from teffmc.model import Terms

    grid = _lined_grid(rng)
    model = ModelSpec(veil="grey", patches=patches)
    n = 4
    p = {"teff": np.linspace(3500.0, 3700.0, n), "logg": np.zeros(n), "mh": np.zeros(n),
         "theta": np.linspace(1.0, 4.0, n), "a_v": np.linspace(0.0, 2.0, n),
         "r_v": np.full(n, 3.1), "veil_tau": np.linspace(0.0, 1.5, n),
         "veil_cover": np.full(n, 0.6)}
    if patches:
        p |= {"teff": np.linspace(3650.0, 3700.0, n), "patch_cover": np.full(n, 0.2),
              "patch_dteff": np.full(n, 150.0)}
    got = observed_flux(grid, Terms(grid.wave, model, Prior("fixed", value=3.1)), p)
    half = 0.5 * p["theta"] * np.pi / 648e6
    ext = 10.0 ** (-0.4 * p["a_v"][:, None] * extinction_curve("CCM89", 3.1, grid.wave))
    veil = 1.0 - 0.6 * (1.0 - np.exp(-p["veil_tau"]))[:, None]
    want = half[:, None] ** 2 * surface_flux(grid, p) * ext * veil
    np.testing.assert_allclose(got, want, rtol=1e-12)
