"""Grid-physics nuisance axes: exactness at the stored models, file round trip, pixels.

The quadratic in x = ln(scale) through three models is exact at x = 0, +-h by
construction (Lagrange interpolation, common practice, no source); these tests check the
implementation reproduces the stored models there, carries the axes through the per-run
convolution, and keeps them in the file with a checksum.
"""

import numpy as np
import pytest

from teffmc.errors import GridError
from teffmc.photosphere import Grid
from teffmc.photosphere.nuisance import NuisanceAxis

H = np.log(2.0)


def _grid(rng):
    teff = np.array([3000.0, 3500.0, 4000.0])
    logg = np.array([0.0, 1.0])
    mh = np.array([0.0])
    wave = np.geomspace(4000.0, 9000.0, 400)
    base = -1.0 + 0.1 * rng.standard_normal((3, 2, 1, 400)).cumsum(axis=-1) / 20
    minus = base - 0.05 * rng.random((3, 2, 1, 400))
    plus = base + 0.08 * rng.random((3, 2, 1, 400))
    ax = NuisanceAxis("tio", H, minus, plus, 0.5, 2.0, note="test")
    return Grid(teff, logg, mh, wave, base, name="t", nuisance=(ax,)), base, minus, plus


@pytest.mark.parametrize("x, which", [(0.0, "base"), (-H, "minus"), (H, "plus")])
def test_nodes_reproduce_the_stored_models(rng, x, which):
    g, base, minus, plus = _grid(rng)
    want = {"base": base, "minus": minus, "plus": plus}[which]
    got = g.interpolate_log([3500.0], [1.0], [0.0], {"tio": np.array([x])})[0]
    np.testing.assert_allclose(got, want[1, 1, 0], atol=1e-12)


def test_without_nuisance_values_the_grid_is_nominal(rng):
    g, base, *_ = _grid(rng)
    np.testing.assert_array_equal(g.interpolate_log(3500.0, 1.0, 0.0)[0], base[1, 1, 0])


def test_between_nodes_the_response_is_interpolated_like_the_flux(rng):
    """At mid-cell and x = h the result is the multilinear mix of the 'plus' models."""
    g, _, _, plus = _grid(rng)
    got = g.interpolate_log([3250.0], [0.5], [0.0], {"tio": np.array([H])})[0]
    want = 0.25 * (plus[0, 0, 0] + plus[1, 0, 0] + plus[0, 1, 0] + plus[1, 1, 0])
    np.testing.assert_allclose(got, want, atol=1e-12)


def test_file_round_trip_and_checksum(rng, tmp_path):
    g, *_ = _grid(rng)
    g.write(tmp_path / "g.h5")
    g2 = Grid.read(tmp_path / "g.h5")
    assert g2.nuisance_names == ("tio",)
    a = g2.nuisance[0]
    assert (a.step, a.low, a.high, a.note) == (pytest.approx(H), 0.5, 2.0, "test")
    x = {"tio": np.array([0.3, -0.4])}
    np.testing.assert_allclose(g2.interpolate_log([3100.0, 3900.0], [0.2, 0.7], 0.0, x),
                               g.interpolate_log([3100.0, 3900.0], [0.2, 0.7], 0.0, x),
                               atol=1e-6)   # float32 storage
    import h5py

    with h5py.File(tmp_path / "g.h5", "r+") as f:
        f["nuisance/tio/plus"][0, 0, 0, 0] += 0.5
    with pytest.raises(GridError, match="nuisance checksum"):
        Grid.read(tmp_path / "g.h5")


def test_on_pixels_carries_the_axes(rng):
    g, *_ = _grid(rng)
    pix = np.geomspace(5000.0, 8000.0, 150)
    gp = g.on_pixels(pix, resolution=300.0)
    x = {"tio": np.array([H])}
    direct = Grid(g.teff, g.logg, g.mh, g.wave, g.nuisance[0].plus).on_pixels(
        pix, resolution=300.0)
    np.testing.assert_allclose(gp.interpolate_log(3500.0, 1.0, 0.0, x),
                               direct.interpolate_log(3500.0, 1.0, 0.0), atol=1e-12)


def test_prior_range_must_lie_inside_the_stored_step(rng):
    _, base, minus, plus = _grid(rng)
    with pytest.raises(GridError, match="prior range"):
        NuisanceAxis("tio", H, minus, plus, 0.3, 2.0)
