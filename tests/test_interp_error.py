"""Leave-one-node-out interpolation error of a photosphere grid."""

import numpy as np
import pytest

from teffmc.errors import GridError
from teffmc.photosphere import Grid
from teffmc.photosphere.interp_error import interp_variance, leave_one_out_error

WAVE = np.linspace(5000.0, 6000.0, 7)
LOGG = np.array([0.0, 1.0])
MH = np.array([-0.5, 0.0])


def _grid(teff, law, logg=LOGG, mh=MH):
    """Grid with log10 F = law(T, logg, mh, wave), stored as float64 to test the maths."""
    T, G, M, W = np.meshgrid(teff, logg, mh, WAVE, indexing="ij")
    return Grid(teff, logg, mh, WAVE, law(T, G, M, W))


def _curvature(W):
    return 0.02 + 0.01 * (W - 5000.0) / 1000.0  # dex per (1000 K)^2, varies per pixel


def test_linear_in_teff_gives_zero_error():
    # Linear interpolation is exact for a linear function (common practice, no source).
    teff = np.array([3000.0, 3250.0, 3500.0, 4000.0, 4100.0])
    g = _grid(teff, lambda T, G, M, W: 5.0 + 1e-3 * T * (W / 5000.0) + 0.1 * G)
    for position in ("rms", "midpoint"):
        np.testing.assert_allclose(leave_one_out_error(g, position=position), 0.0, atol=1e-12)
    per_node = leave_one_out_error(g, per_node=True)
    assert np.all(np.isnan(per_node[[0, -1]]))  # edge nodes have one neighbour only
    np.testing.assert_allclose(per_node[1:-1], 0.0, atol=1e-12)


def test_quadratic_matches_the_second_difference_error():
    # log F = 5 + a(lambda) x^2 with x = T / 1000 K, uniform step h. The second difference
    # is D2 = L(x-h) - 2 L(x) + L(x+h) = 2 a h^2. Linear interpolation of a x^2 across a cell
    # [x0, x0+h] errs by a (x - x0)(x0 + h - x) (remainder of linear interpolation, from
    # memory), whose RMS over the cell is a h^2 / sqrt(30) = D2 / (2 sqrt 30) and whose
    # largest value (midpoint) is a h^2 / 4 = D2 / 8.
    teff = np.arange(3000.0, 4001.0, 250.0)
    g = _grid(teff, lambda T, G, M, W: 5.0 + _curvature(W) * (T / 1000.0) ** 2)
    d2 = 2.0 * _curvature(WAVE) * 0.25**2
    np.testing.assert_allclose(leave_one_out_error(g), 10 ** (d2 / (2 * np.sqrt(30))) - 1,
                               rtol=1e-10)
    np.testing.assert_allclose(leave_one_out_error(g, position="midpoint"), 10 ** (d2 / 8) - 1,
                               rtol=1e-10)


def test_rms_estimate_matches_the_grids_actual_error():
    # Direct check: the grid's own interpolation error, averaged over points spread evenly
    # uniformly in Teff, against the estimate (quadratic log flux, uneven Teff steps).
    teff = np.array([3000.0, 3200.0, 3500.0, 3700.0, 4000.0])
    g = _grid(teff, lambda T, G, M, W: 5.0 + _curvature(W) * (T / 1000.0) ** 2)
    t = np.arange(3000.05, 4000.0, 0.1)
    got = g.interpolate_log(t, 0.0, 0.0)
    true = 5.0 + _curvature(WAVE) * (t[:, None] / 1000.0) ** 2
    actual_rms = np.sqrt(np.mean((10 ** (got - true) - 1) ** 2, axis=0))
    np.testing.assert_allclose(leave_one_out_error(g), actual_rms, rtol=1e-3)
    # uneven steps: per-node curvature is recovered exactly, scaled to the real cells
    per_node = leave_one_out_error(g, per_node=True)
    h1, h2 = 0.3, 0.2  # node 3500 K: cells of 300 K and 200 K, in units of 1000 K
    want = _curvature(WAVE) * np.sqrt((h1**5 + h2**5) / (30 * (h1 + h2)))
    np.testing.assert_allclose(per_node[2, 0, 0], 10**want - 1, rtol=1e-10)


def test_axes_add_in_quadrature_and_holes_are_skipped():
    teff = np.arange(3000.0, 4001.0, 250.0)
    logg = np.array([0.0, 0.5, 1.0, 1.5])

    def law(T, G, M, W):
        return 5.0 + _curvature(W) * (T / 1000.0) ** 2 + 0.1 * G**2

    g = _grid(teff, law, logg=logg)
    e_t = leave_one_out_error(g, axes="teff")
    e_g = leave_one_out_error(g, axes=("logg",))
    e_both = leave_one_out_error(g, axes=("teff", "logg"))
    np.testing.assert_allclose(e_both, np.hypot(e_t, e_g), rtol=1e-12)
    lf = g.log_flux.copy()
    lf[2, 1, 0] = np.nan
    holed = Grid(teff, logg, MH, WAVE, lf)
    np.testing.assert_allclose(leave_one_out_error(holed), e_t, rtol=1e-10)  # same curvature
    per_node = leave_one_out_error(holed, per_node=True)
    assert np.all(np.isnan(per_node[[1, 2, 3], 1, 0]))  # the hole and its two neighbours


def test_bad_requests_raise_grid_error():
    g = _grid(np.array([3000.0, 3500.0]), lambda T, G, M, W: 5.0 + 0 * T)
    with pytest.raises(GridError, match="axis 'teff' has 2 nodes"):
        leave_one_out_error(g)
    with pytest.raises(GridError, match=r"axis should be one of .* but got 'vsini'"):
        leave_one_out_error(g, axes=("vsini",))
    with pytest.raises(GridError, match="position should be one of"):
        leave_one_out_error(g, axes="teff", position="worst")


def test_interp_variance_is_fractional_error_times_model_flux_squared():
    teff = np.arange(3000.0, 4001.0, 250.0)
    g = _grid(teff, lambda T, G, M, W: 5.0 + _curvature(W) * (T / 1000.0) ** 2)
    frac = leave_one_out_error(g)
    model = g.interpolate([3100.0, 3900.0], 0.5, -0.1)
    var = interp_variance(g, model)
    assert var.shape == (2, WAVE.size)
    np.testing.assert_allclose(var, (frac * model) ** 2, rtol=1e-12)
    assert interp_variance(g, model) is not var  # cached error, fresh result
    np.testing.assert_allclose(interp_variance(frac, model), var, rtol=0)
    with pytest.raises(GridError, match="should end in the same n_wave"):
        interp_variance(frac, model[:, :3])
