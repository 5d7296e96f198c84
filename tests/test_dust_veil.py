"""The circumstellar dust veil: colours of grain sizes, scattering, exact no-veil limit."""

import numpy as np
import pytest
from scipy.integrate import quad

from teffmc.dust import Veil, forward_fraction, grain_optics
from teffmc.errors import ConfigError

B_V = np.array([4400.0, 5500.0])  # [Angstrom], docs/references.md#dust-veil colour convention


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
    # large grains (>~ 1 micron) extinguish almost greyly (common practice, no source;
    # docs/references.md#dust-veil)
    assert abs(_ebv_over_av(spread_veil, radius)) < 0.1


@pytest.mark.parametrize("radius", [0.05, 0.07, 0.1])
def test_small_grains_redden(spread_veil, radius):
    # small grains redden; E(B-V)/A_V > 0.3 (common practice, no source;
    # docs/references.md#dust-veil)
    assert _ebv_over_av(spread_veil, radius) > 0.3


@pytest.mark.parametrize(
    "radius_range, spread, radius, ref",
    [
        # computed with miepython, m = 1.7 - 0.03i, single sizes (tabulated nodes)
        # (docs/references.md#mie-theory-and-optical-constants)
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
    # ripple; -0.29 at 0.3 micron, computed, docs/references.md#mie-theory-and-optical-constants),
    # and then the returned light is too:
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


@pytest.mark.parametrize("kind, scattering, cone", [("mie", True, 90.0), ("mie", True, 10.0),
                                                   ("mie", False, 90.0), ("grey", False, 90.0)])
def test_zero_tau_or_zero_cover_is_exactly_the_bare_photosphere(kind, scattering, cone):
    veil = Veil(kind, WAVE, "silicate", 0.1, scattering=scattering, radius_range=(0.1, 2.0),
                scatter_cone_deg=cone)
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


# --- Forward cone of a compact screen (scatter_cone_deg < 90) --------------------------

@pytest.mark.parametrize("cone", [5.0, 10.0, 45.0, 90.0, 180.0])
def test_cone_fraction_rayleigh_limit(cone):
    # Rayleigh phase function (1 + cos^2 theta) 3 / (16 pi) (Bohren & Huffman 1983, ch. 5,
    # from memory): P(theta_c) = 3/8 [(1 - mu_c) + (1 - mu_c^3) / 3]
    from teffmc.dust.mie import cone_fraction

    mu = np.cos(np.radians(cone))
    want = 3.0 / 8.0 * ((1.0 - mu) + (1.0 - mu**3) / 3.0)
    assert cone_fraction(1.5 - 0.01j, 1e-3, cone)[0] == pytest.approx(want, rel=1e-4)


@pytest.mark.parametrize("x", [100.0, 300.0])
@pytest.mark.parametrize("cone", [0.5, 1.0, 2.0])
def test_cone_fraction_large_sphere_is_airy_diffraction(x, cone):
    # A large opaque sphere diffracts like a disc of its radius (Babinet): the diffracted
    # power within theta is Rayleigh's encircled-energy formula 1 - J0^2(x th) - J1^2(x th)
    # (Born & Wolf, Principles of Optics, sec. 8.5.2, from memory) in units of the
    # geometric cross-section. Q_sca P adds the little grazing reflection (< 0.05).
    from scipy.special import j0, j1

    from teffmc.dust.mie import cone_fraction, efficiencies

    m = 1.5 - 1.0j  # strongly absorbing: no light through the sphere
    q_sca = efficiencies(m, x)[1]
    z = x * np.radians(cone)
    airy = 1.0 - j0(z) ** 2 - j1(z) ** 2
    got = q_sca * cone_fraction(m, x, cone)[0]
    assert 0.0 <= got - airy < 0.05


def test_cone_fraction_whole_sphere_and_errors():
    from teffmc.dust.mie import cone_fraction

    np.testing.assert_allclose(cone_fraction(1.7 - 0.03j, [0.5, 5.0, 50.0], 180.0), 1.0,
                               rtol=1e-6)
    for bad in (0.0, -3.0, 181.0, np.nan):
        with pytest.raises(ConfigError, match="cone"):
            cone_fraction(1.7 - 0.03j, 1.0, bad)


def test_hemisphere_henyey_greenstein_is_close_to_mie():
    # The default (theta_c = 90 deg) uses the Henyey-Greenstein hemisphere fraction; its
    # error against the Mie phase function stays small for these grains (our claim in
    # teffmc.dust.veil, checked here).
    from teffmc.dust.mie import cone_fraction, efficiencies

    x = 2 * np.pi * np.array([0.3, 0.5, 1.0]) / np.array([[0.4], [0.8]])
    g = efficiencies(1.7 - 0.03j, x)[2]
    np.testing.assert_allclose(cone_fraction(1.7 - 0.03j, x.ravel(), 90.0),
                               forward_fraction(g).ravel(), atol=0.025)


def test_cone_table_matches_direct_size_average():
    # the table (coarse cone grid interpolated onto the fine x grid, size-averaged) vs
    # a direct size average of Q_sca P at each wavelength
    from teffmc.dust.materials import get_material
    from teffmc.dust.mie import cone_fraction, efficiencies
    from teffmc.dust.mietable import MieTable

    wave = np.array([4000.0, 5500.0, 8000.0])
    table = MieTable("silicate", wave, 0.1, (0.3, 1.0), n_radius=3, cone_deg=10.0)
    m = get_material("silicate").refractive_index(wave)
    sig = 0.1 * np.log(10.0)
    u = np.linspace(-5 * sig, 5 * sig, 401)
    for i, a in enumerate(table.radius):
        w = np.exp(-0.5 * (u / sig) ** 2 + 2 * u)
        for j, lam in enumerate(wave * 1e-4):
            x = 2 * np.pi * a * np.exp(u) / lam
            q_sca = efficiencies(m[j], x)[1]
            direct = np.sum(w * q_sca * cone_fraction(m[j], x, 10.0)) / np.sum(w)
            assert table.table_q_cone[i, j] == pytest.approx(direct, rel=0.02)


@pytest.fixture(scope="module")
def compact(tmp_path_factory):
    wave = np.array([4000.0, 8000.0])
    return {on: _module_veil(tmp_path_factory, "mie", wave, "silicate", 0.1, scattering=on,
                             radius_range=(0.1, 2.0), scatter_cone_deg=10.0)
            for on in (True, False)}


@pytest.mark.parametrize("radius", [0.3, 0.5, 0.7, 1.0])
def test_compact_screen_scattering_leaves_blue_end_brighter(compact, on_off, radius):
    # Issue criterion: with scattering on, a veil of 0.3-1 micron grains leaves 0.4 micron
    # brighter relative to 0.8 micron than the same veil without scattering. Holds for a
    # compact screen (theta_c = 10 deg: the forward diffraction lobe, narrower and taller
    # in the blue) and not for a screen hugging the star (hemisphere), where these grains
    # return redder light (see teffmc.dust.veil).
    def blue_over_red(veil, s):
        f = veil.factor([1.0], [0.8], [radius], s)[0]
        return f[0] / f[1]

    bare = blue_over_red(compact[False], None)
    assert blue_over_red(compact[True], [1.0]) > 1.01 * bare
    assert blue_over_red(on_off["silicate", True], [1.0]) < bare   # hemisphere: redder


def test_scatter_cone_deg_is_validated():
    for bad in (0.0, 95.0, np.inf):
        with pytest.raises(ConfigError, match="scatter_cone_deg"):
            Veil("mie", WAVE, "silicate", 0.1, radius_range=(0.1, 2.0), scatter_cone_deg=bad)
