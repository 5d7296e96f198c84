"""Gaussian line-spread + resampling matrix."""

import numpy as np
import pytest

from teffmc.errors import ConfigError, DataError
from teffmc.observe import FWHM_PER_SIGMA, apply_lsf, convolve_resample, lsf_matrix


def _moments(wave, flux):
    norm = np.trapezoid(flux, wave)
    mean = np.trapezoid(flux * wave, wave) / norm
    var = np.trapezoid(flux * (wave - mean) ** 2, wave) / norm
    return norm, mean, var


@pytest.mark.parametrize("fwhm", [0.5, 2.0, 7.3])
def test_delta_becomes_gaussian_of_given_fwhm(fwhm):
    step = 0.01
    wave_in = np.arange(5000.0, 5100.0, step)
    flux = np.zeros_like(wave_in)
    j = 5000
    flux[j] = 1.0 / step  # a line of integrated flux 1
    wave_out = np.arange(5020.0, 5080.0, 0.05)
    out = convolve_resample(wave_in, flux, wave_out, fwhm_A=fwhm)
    sigma = fwhm / 2.3548200450309493  # FWHM = 2 sqrt(2 ln 2) sigma
    norm, mean, var = _moments(wave_out, out)
    assert norm == pytest.approx(1.0, abs=1e-6)  # flux conserved
    assert mean == pytest.approx(wave_in[j], abs=1e-9)
    # the input cell adds its top-hat variance step^2/12
    assert np.sqrt(var) == pytest.approx(np.sqrt(sigma**2 + step**2 / 12), rel=1e-5)
    gauss = np.exp(-0.5 * ((wave_out - wave_in[j]) / sigma) ** 2) / (sigma * np.sqrt(2 * np.pi))
    np.testing.assert_allclose(out, gauss, atol=2e-4 * gauss.max())
    half = wave_out[out >= 0.5 * out.max()]
    assert half[-1] - half[0] == pytest.approx(fwhm, abs=0.1)


def test_constant_resolution_width_scales_with_wavelength():
    wave_in = np.arange(4000.0, 9000.0, 0.02)
    flux = np.zeros((2, wave_in.size))
    j4, j8 = np.searchsorted(wave_in, [4500.0, 8500.0])
    flux[0, j4] = flux[1, j8] = 1.0 / 0.02
    wave_out = np.concatenate([np.arange(4470.0, 4530.0, 0.1), np.arange(8450.0, 8550.0, 0.1)])
    out = convolve_resample(wave_in, flux, wave_out, resolution=3000.0)
    for row, centre in zip(out, (wave_in[j4], wave_in[j8])):
        sel = np.abs(wave_out - centre) < 20
        norm, _, var = _moments(wave_out[sel], row[sel])
        assert norm == pytest.approx(1.0, abs=1e-4)
        assert np.sqrt(var) * FWHM_PER_SIGMA == pytest.approx(centre / 3000.0, rel=1e-3)


def test_smooth_function_unchanged_and_constant_exact():
    wave_in = np.linspace(5000.0, 7000.0, 20001)
    smooth = 1.0 + 0.3 * np.sin(wave_in / 300.0)
    wave_out = np.linspace(5100.0, 6900.0, 3001)
    out = convolve_resample(
        wave_in, np.stack([smooth, np.full_like(smooth, 4.2)]), wave_out, fwhm_A=1.0
    )
    np.testing.assert_allclose(out[0], 1.0 + 0.3 * np.sin(wave_out / 300.0), rtol=1e-5)
    np.testing.assert_allclose(out[1], 4.2, rtol=1e-13)


def test_coarse_input_still_conserves_flux():
    # input pixels (1 A) wider than the line-spread sigma (0.42 A)
    wave_in = np.arange(6000.0, 6100.0, 1.0)
    flux = np.zeros_like(wave_in)
    flux[50] = 1.0
    wave_out = np.arange(6030.0, 6070.0, 0.01)
    out = convolve_resample(wave_in, flux, wave_out, fwhm_A=1.0)
    assert np.trapezoid(out, wave_out) == pytest.approx(1.0, abs=1e-6)


def test_batch_shape_and_matrix_reuse():
    rng = np.random.default_rng(1)
    wave_in = np.linspace(5000.0, 6000.0, 500)
    grid = rng.uniform(1, 2, size=(3, 2, 4, wave_in.size))
    wave_out = np.linspace(5100.0, 5900.0, 77)
    matrix = lsf_matrix(wave_in, wave_out, resolution=2000.0)
    out = apply_lsf(matrix, grid)
    assert out.shape == (3, 2, 4, 77)
    np.testing.assert_allclose(out[1, 0, 2], apply_lsf(matrix, grid[1, 0, 2]), rtol=1e-14)
    np.testing.assert_allclose(matrix.sum(axis=1), 1.0, rtol=1e-13)


def test_per_pixel_fwhm_array():
    wave_in = np.arange(5000.0, 5100.0, 0.01)
    wave_out = np.array([5030.0, 5070.0])
    fwhm = np.array([1.0, 3.0])
    matrix = lsf_matrix(wave_in, wave_out, fwhm_A=fwhm)
    for i in range(2):
        row = matrix[[i]].toarray()[0] / 0.01
        _, _, var = _moments(wave_in, row)
        assert np.sqrt(var) * FWHM_PER_SIGMA == pytest.approx(fwhm[i], rel=1e-4)


def test_errors():
    wave_in = np.arange(5000.0, 5100.0, 0.1)
    with pytest.raises(DataError, match="input covers") as info:
        lsf_matrix(wave_in, np.array([5001.0, 5050.0]), fwhm_A=2.0)
    assert info.value.column == "wave_out"
    with pytest.raises(ConfigError, match="exactly one"):
        lsf_matrix(wave_in, np.array([5050.0, 5051.0]))
    with pytest.raises(ConfigError, match="> 0"):
        lsf_matrix(wave_in, np.array([5050.0, 5051.0]), resolution=-5.0)
    with pytest.raises(DataError, match="increasing"):
        lsf_matrix(wave_in[::-1], np.array([5050.0, 5051.0]), fwhm_A=1.0)
    with pytest.raises(DataError, match="pixels"):
        apply_lsf(lsf_matrix(wave_in, np.array([5050.0, 5051.0]), fwhm_A=1.0), np.ones(7))


def test_hat_average_is_the_transpose_of_linear_interpolation(rng):
    """sum_j g(x_j) F_j dx_j = sum_k g(y_k) N_k Fbar_k for any g linear between the output
    nodes y (hat functions phi_k, N_k = sum_j phi_k(x_j) dx_j): the identity that makes a
    band integral on hat-averaged coarse pixels exact for a filter linear between them
    (the adjoint of interpolation, common practice, no source)."""
    from teffmc.observe.lsf import hat_average_matrix

    x = np.geomspace(3000.0, 9000.0, 4000)
    y = np.geomspace(3000.0, 9000.0, 300)
    a = hat_average_matrix(x, y)
    np.testing.assert_allclose(np.asarray(a.sum(axis=1)).ravel(), 1.0, rtol=1e-12)
    flux = 1.0 + rng.uniform(0.0, 1.0, x.size)
    g_nodes = rng.uniform(0.0, 1.0, y.size)
    g = np.interp(x, y, g_nodes)
    dx = np.gradient(x)
    phi = np.array([np.interp(x, y, np.eye(y.size)[k]) for k in range(y.size)])
    norm = phi @ dx
    assert np.sum(g * flux * dx) == pytest.approx(np.sum(g_nodes * norm * (a @ flux)),
                                                  rel=1e-12)


def test_hat_average_refuses_output_outside_or_finer_than_the_input():
    from teffmc.errors import DataError
    from teffmc.observe.lsf import hat_average_matrix

    x = np.linspace(4000.0, 5000.0, 101)
    with pytest.raises(DataError, match="inside the input"):
        hat_average_matrix(x, np.linspace(3990.0, 5000.0, 10))
    with pytest.raises(DataError, match="no input pixel"):
        hat_average_matrix(x, np.concatenate([[4000.0, 4000.1, 4000.2], [5000.0]]))
