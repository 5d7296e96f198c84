"""The circumstellar dust veil: colours of grain sizes, scattering, exact no-veil limit."""

import numpy as np
import pytest
from scipy.integrate import quad

from teffmc.dust import Veil, forward_fraction, grain_optics
from teffmc.errors import ConfigError

B_V = np.array([4400.0, 5500.0])  # [Angstrom], REFERENCES.md colour convention


@pytest.fixture(autouse=True)
def _cache_in_tmp(tmp_path, monkeypatch):
    monkeypatch.setenv("TEFFMC_CACHE", str(tmp_path / "cache"))


def _ebv_over_av(veil, radius):
    f = veil.factor([0.5], [1.0], [radius])[0]
    a = -2.5 * np.log10(f)  # A_lambda of a fully covering, non-scattering veil
    return a[0] / a[1] - 1.0


def _module_veil(tmp_path_factory, *args, **kwargs):
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("TEFFMC_CACHE", str(tmp_path_factory.mktemp("cache")))
        return Veil(*args, **kwargs)


@pytest.fixture(scope="module")
def spread_veil(tmp_path_factory):
    return _module_veil(tmp_path_factory, "mie", B_V, "silicate", 0.1, scattering=False,
                        radius_range=(0.03, 5.0))


@pytest.fixture(scope="module")
def on_off(tmp_path_factory):
    wave = np.array([4000.0, 8000.0])
    return {
        (mat, on): _module_veil(tmp_path_factory, "mie", wave, mat, 0.1, scattering=on,
                                radius_range=(0.1, 2.0))
        for mat in ("silicate", "corundum", "silica") for on in (True, False)
    }


@pytest.mark.parametrize("radius", [1.0, 1.5, 2.0, 3.0, 5.0])
def test_large_grains_are_nearly_grey(spread_veil, radius):
    # REFERENCES.md: large grains (>~ 1 micron) extinguish almost greyly
    assert abs(_ebv_over_av(spread_veil, radius)) < 0.1


@pytest.mark.parametrize("radius", [0.05, 0.07, 0.1])
def test_small_grains_redden(spread_veil, radius):
    # REFERENCES.md: small grains redden; E(B-V)/A_V > 0.3
    assert _ebv_over_av(spread_veil, radius) > 0.3


@pytest.mark.parametrize(
    "radius_range, spread, radius, ref",
    [
        # REFERENCES.md, computed, m = 1.7 - 0.03i, single sizes (tabulated nodes)
        ((0.1, 0.3), 0.0, 0.1, 0.97),
        ((0.1, 0.3), 0.0, 0.3, -0.29),  # the Mie ripple: not monotonic in size
        ((1.0, 3.0), 0.0, 1.0, -0.09),
        ((1.0, 3.0), 0.0, 3.0, -0.02),
        ((1.0, 3.0), 0.1, 1.0, -0.02),  # 0.1 dex log-normal spread
    ],
)
def test_grain_size_colour_reference(radius_range, spread, radius, ref):
    veil = Veil("mie", B_V, "silicate", spread, scattering=False,
                radius_range=radius_range, n_radius=2)
    assert _ebv_over_av(veil, radius) == pytest.approx(ref, abs=0.006)


@pytest.mark.parametrize("g", [-0.5, -2e-4, 0.0, 5e-4, 0.3, 0.65, 0.95])
def test_forward_fraction_is_hemisphere_integral_of_henyey_greenstein(g):
    # Henyey & Greenstein 1941 phase function, normalised on mu in [-1, 1]
    def p_hg(mu):
        return 0.5 * (1 - g * g) / (1 + g * g - 2 * g * mu) ** 1.5

    assert float(forward_fraction(g)) == pytest.approx(quad(p_hg, 0.0, 1.0)[0], rel=1e-9)


def test_forward_fraction_limits():
    np.testing.assert_allclose(forward_fraction([-1.0, 0.0, 1.0]), [0.0, 0.5, 1.0], atol=1e-15)


WAVE = np.array([4000.0, 4400.0, 5000.0, 6000.0, 8000.0])


@pytest.mark.parametrize("material", ["silicate", "corundum"])
def test_factor_matches_independent_mie_evaluation(material):
    veil = Veil("mie", WAVE, material, 0.1, radius_range=(0.1, 2.0))
    tau, cover, s, a = 0.8, 0.6, 0.7, 0.45
    got = veil.factor([tau], [cover], [a], [s])[0]
    q_ext, q_sca, g = grain_optics(material, a, WAVE, 0.1)
    q_v = grain_optics(material, a, [5500.0], 0.1)[0][0]
    t = np.exp(-tau * q_ext / q_v * (1 - s * q_sca / q_ext * forward_fraction(g)))
    np.testing.assert_allclose(got, 1 - cover * (1 - t), rtol=3e-3)


def test_scattering_blues_a_reddening_veil():
    # 0.1 micron grains redden (tau larger at 0.4 micron): returning part of the removed
    # light gives back more at 0.4 than at 0.8 micron.
    wave = np.array([4000.0, 8000.0])
    on = Veil("mie", wave, "silicate", 0.1, scattering=True, radius_range=(0.05, 2.0))
    off = Veil("mie", wave, "silicate", 0.1, scattering=False, radius_range=(0.05, 2.0))
    f_on = on.factor([1.0], [0.8], [0.1], [1.0])[0]
    f_off = off.factor([1.0], [0.8], [0.1])[0]
    assert f_on[0] / f_on[1] > 1.05 * f_off[0] / f_off[1]


@pytest.mark.parametrize("material", ["silicate", "corundum", "silica"])
@pytest.mark.parametrize("radius", [0.3, 0.5, 0.7, 1.0])
def test_scattering_colour_change_follows_returned_light(on_off, material, radius):
    # For 0.3-1 micron grains tau is often *smaller* at 0.4 than at 0.8 micron (the
    # ripple; REFERENCES.md -0.29 at 0.3 micron), and then the returned light is too:
    # scattering brightens 0.4 relative to 0.8 micron exactly when
    # tau omega F(g) is larger at 0.4 micron (cover = 1, see teffmc.dust.veil).
    wave = np.array([4000.0, 8000.0])
    on, off = on_off[material, True], on_off[material, False]
    f_on = on.factor([1.0], [1.0], [radius], [1.0])[0]
    f_off = off.factor([1.0], [1.0], [radius])[0]
    change = np.log(f_on[0] / f_on[1]) - np.log(f_off[0] / f_off[1])
    q_ext, q_sca, g = grain_optics(material, radius, np.append(wave, 5500.0), 0.1)
    returned = q_sca * forward_fraction(g) / q_ext[2]  # tau omega F per unit veil_tau
    assert change == pytest.approx(returned[0] - returned[1], abs=3e-3)


def test_scattering_never_dims():
    veil = Veil("mie", WAVE, "silicate", 0.1, radius_range=(0.1, 2.0))
    n = 6
    args = (np.full(n, 1.3), np.full(n, 0.9), np.geomspace(0.1, 2.0, n))
    assert np.all(veil.factor(*args, np.ones(n)) > veil.factor(*args, np.zeros(n)))


@pytest.mark.parametrize("kind, scattering", [("mie", True), ("mie", False), ("grey", False)])
def test_zero_tau_or_zero_cover_is_exactly_the_bare_photosphere(kind, scattering):
    veil = Veil(kind, WAVE, "silicate", 0.1, scattering=scattering, radius_range=(0.1, 2.0))
    n = 5
    rng = np.random.default_rng(1)
    radius, s = rng.uniform(0.1, 2.0, n), rng.uniform(0, 1, n)
    f = veil.factor(np.zeros(n), rng.uniform(0, 1, n), radius, s)
    assert f.shape == (n, WAVE.size) and np.all(f == 1.0)
    f = veil.factor(rng.uniform(0, 3, n), np.zeros(n), radius, s)
    assert np.all(f == 1.0)


def test_grey_veil():
    veil = Veil("grey", WAVE)
    f = veil.factor([0.0, 0.5, 2.0], [1.0, 0.5, 0.25])
    expected = 1 - np.array([1.0, 0.5, 0.25]) * (1 - np.exp(-np.array([0.0, 0.5, 2.0])))
    np.testing.assert_allclose(f, np.repeat(expected[:, None], WAVE.size, axis=1), rtol=1e-15)


def test_pixels_need_not_include_the_reference_wavelength():
    with_v = Veil("mie", np.array([4000.0, 5500.0, 8000.0]), "silicate", 0.1,
                  radius_range=(0.1, 2.0))
    without = Veil("mie", np.array([4000.0, 8000.0]), "silicate", 0.1, radius_range=(0.1, 2.0))
    tau_with = with_v.optical_depth([1.0], [0.4])[0]
    assert tau_with[1] == pytest.approx(1.0, rel=1e-12)
    np.testing.assert_allclose(without.optical_depth([1.0], [0.4])[0], tau_with[[0, 2]],
                               rtol=1e-12)


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda v: v.factor([0.5], [1.2], [0.5], [0.5]), "veil_cover"),
        (lambda v: v.factor([-0.1], [0.5], [0.5], [0.5]), "veil_tau"),
        (lambda v: v.factor([0.5], [0.5], None, [0.5]), "grain_radius"),
        (lambda v: v.factor([0.5], [0.5], [0.5], None), "veil_scatter"),
        (lambda v: v.factor([0.5], [0.5], [0.5], [1.5]), "veil_scatter"),
        (lambda v: v.factor([0.5], [0.5], [20.0], [0.5]), "grain_radius"),
    ],
)
def test_parameter_validation(call, match):
    veil = Veil("mie", WAVE, "silicate", 0.1, radius_range=(0.1, 2.0))
    with pytest.raises(ConfigError, match=match):
        call(veil)


def test_kind_validation():
    with pytest.raises(ConfigError, match="allowed: mie, grey"):
        Veil("fog", WAVE)
    with pytest.raises(ConfigError, match="grey veil has no scattering"):
        Veil("grey", WAVE, scattering=True)
