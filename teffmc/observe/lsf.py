"""Gaussian line-spread function and resampling, as one sparse matrix.

The model spectrum is treated as constant across each input pixel (cells
bounded by the mid-points between input wavelengths). Output pixel i is

    out_i = sum_j M_ij in_j,   M_ij = [Phi((b_{j+1} - y_i)/s_i) - Phi((b_j - y_i)/s_i)] / norm_i

with Phi the normal CDF, s_i the Gaussian sigma at output wavelength y_i and
norm_i making each row sum to one. Integrating the Gaussian over each input
cell (rather than sampling it) keeps the result right when the input grid is
coarse compared with the line-spread, and conserves flux: a line of
integrated flux F in the input has integrated flux F in the output (to the
accuracy of the output sampling). A constant stays exactly constant.

The kernel is truncated at +-5 sigma (a fraction 6e-7 of its area).
"""

import numpy as np
from scipy import sparse
from scipy.special import ndtr

from teffmc.errors import ConfigError, DataError

__all__ = ["FWHM_PER_SIGMA", "apply_lsf", "convolve_resample", "hat_average_matrix", "lsf_matrix"]

FWHM_PER_SIGMA = 2.0 * np.sqrt(2.0 * np.log(2.0))  # 2.3548..., Gaussian FWHM / sigma
_NSIGMA = 5.0
_MIN_COVERAGE = 1.0 - 1e-3  # refuse output pixels whose kernel leaves the input range


def _check_axis(wave, label):
    wave = np.asarray(wave, dtype=float)
    if wave.ndim != 1 or wave.size < 2:
        raise DataError(
            f"should be a 1-D array of >= 2 wavelengths but has shape {wave.shape}",
            column=label,
            value=wave.shape,
        )
    bad = np.flatnonzero(~(np.diff(wave) > 0))
    if bad.size or not np.isfinite(wave).all():
        i = bad[0] + 1 if bad.size else int(np.flatnonzero(~np.isfinite(wave))[0])
        raise DataError(
            f"wavelengths should be finite and strictly increasing; index {i} is {wave[i]}",
            column=label,
            value=wave[i],
        )
    return wave


def _sigma(wave_out, resolution, fwhm_A):
    if (resolution is None) == (fwhm_A is None):
        raise ConfigError(
            "give exactly one of resolution (R) and fwhm_A",
            key="resolution",
            value=(resolution, fwhm_A),
        )
    key, value = ("resolution", resolution) if resolution is not None else ("fwhm_A", fwhm_A)
    value = np.broadcast_to(np.asarray(value, dtype=float), wave_out.shape)
    if not (np.isfinite(value).all() and (value > 0).all()):
        bad = value[~(np.isfinite(value) & (value > 0))][0]
        raise ConfigError(f"should be finite and > 0 but got {bad}", key=key, value=bad)
    fwhm = wave_out / value if key == "resolution" else value
    return fwhm / FWHM_PER_SIGMA


def lsf_matrix(wave_in, wave_out, *, resolution=None, fwhm_A=None):
    """Sparse matrix that convolves with a Gaussian LSF and resamples.

    Parameters
    ----------
    wave_in : array_like, shape (n_in,)
        Input (model) wavelengths [Angstrom], strictly increasing.
    wave_out : array_like, shape (n_out,)
        Output (data) wavelengths [Angstrom], strictly increasing, inside the
        input range by at least ~3.3 sigma of the line-spread.
    resolution : float or array_like of shape (n_out,), optional
        Resolving power R = lambda / FWHM [dimensionless].
    fwhm_A : float or array_like of shape (n_out,), optional
        FWHM of the line-spread [Angstrom]. Give exactly one of the two.

    Returns
    -------
    scipy.sparse.csr_matrix, shape (n_out, n_in)
        Rows sum to one. Apply with :func:`apply_lsf`.
    """
    x = _check_axis(wave_in, "wave_in")
    y = _check_axis(wave_out, "wave_out")
    sigma = _sigma(y, resolution, fwhm_A)
    edges = np.concatenate(
        ([1.5 * x[0] - 0.5 * x[1]], 0.5 * (x[1:] + x[:-1]), [1.5 * x[-1] - 0.5 * x[-2]])
    )
    j0 = np.clip(np.searchsorted(edges, y - _NSIGMA * sigma, "right") - 1, 0, x.size - 1)
    j1 = np.clip(np.searchsorted(edges, y + _NSIGMA * sigma, "left"), 1, x.size)
    counts = np.maximum(j1 - j0, 1)
    rows = np.repeat(np.arange(y.size), counts)
    starts = np.repeat(np.cumsum(counts) - counts, counts)
    cols = np.arange(rows.size) - starts + np.repeat(j0, counts)
    z_lo = (edges[cols] - y[rows]) / sigma[rows]
    z_hi = (edges[cols + 1] - y[rows]) / sigma[rows]
    # Difference of CDFs taken on the side where it does not cancel.
    weight = np.where(z_lo > 0, ndtr(-z_lo) - ndtr(-z_hi), ndtr(z_hi) - ndtr(z_lo))
    coverage = ndtr(np.minimum((edges[-1] - y) / sigma, _NSIGMA)) - ndtr(
        np.maximum((edges[0] - y) / sigma, -_NSIGMA)
    )
    short = np.flatnonzero(coverage < _MIN_COVERAGE)
    if short.size:
        i = short[0]
        raise DataError(
            f"output wavelength {y[i]:.6g} A needs input from {y[i] - 3.3 * sigma[i]:.6g} to "
            f"{y[i] + 3.3 * sigma[i]:.6g} A but the input covers {edges[0]:.6g}-{edges[-1]:.6g} A",
            column="wave_out",
            value=y[i],
        )
    norm = np.bincount(rows, weights=weight, minlength=y.size)
    return sparse.csr_matrix((weight / norm[rows], (rows, cols)), shape=(y.size, x.size))


def hat_average_matrix(wave_in, wave_out):
    """Sparse matrix of hat-weighted means: each output pixel averages the input around it.

    Output pixel k gets ``int F phi_k dlambda / int phi_k dlambda`` over the input pixels
    (trapezoid weights), with ``phi_k`` the hat function of linear interpolation on
    ``wave_out`` (1 at its own node, 0 at its neighbours). This is the transpose of linear
    interpolation from ``wave_out`` to ``wave_in``: a band integral of a filter that is
    linear between output nodes is then exact, and the edge pixels need no input beyond
    ``wave_out``'s span (unlike a Gaussian line-spread).

    Parameters
    ----------
    wave_in : array_like, shape (n_in,)
        Input wavelengths [Angstrom], strictly increasing.
    wave_out : array_like, shape (n_out,)
        Output wavelengths [Angstrom], strictly increasing, n_out >= 2, inside the input
        range, with at least one input pixel between neighbouring output nodes.

    Returns
    -------
    scipy.sparse.csr_matrix, shape (n_out, n_in)
        Rows sum to one. Apply with :func:`apply_lsf`.
    """
    x = _check_axis(wave_in, "wave_in")
    y = _check_axis(wave_out, "wave_out")
    if y.size < 2 or y[0] < x[0] or y[-1] > x[-1]:
        raise DataError(f"output wavelengths {y[0]:.6g}-{y[-1]:.6g} A (n = {y.size}) should "
                        f"lie inside the input {x[0]:.6g}-{x[-1]:.6g} A with n >= 2",
                        column="wave_out", value=y.size)
    cols = np.flatnonzero((x >= y[0]) & (x <= y[-1]))
    xin = x[cols]
    dx = np.gradient(x)[cols]               # trapezoid weights of the input pixels
    j = np.clip(np.searchsorted(y, xin, side="right") - 1, 0, y.size - 2)
    t = (xin - y[j]) / (y[j + 1] - y[j])
    rows = np.concatenate([j, j + 1])
    weight = np.concatenate([(1.0 - t) * dx, t * dx])
    norm = np.bincount(rows, weights=weight, minlength=y.size)
    if np.any(norm <= 0):
        k = int(np.argmin(norm))
        raise DataError(f"no input pixel near output wavelength {y[k]:.6g} A: the output "
                        "pixels are finer than the input's", column="wave_out", value=y[k])
    return sparse.csr_matrix((weight / norm[rows], (rows, np.concatenate([cols, cols]))),
                             shape=(y.size, x.size))


def apply_lsf(matrix, flux_in):
    """Apply a matrix from :func:`lsf_matrix` to a batch of spectra.

    Parameters
    ----------
    matrix : scipy.sparse matrix, shape (n_out, n_in)
    flux_in : array_like, shape (..., n_in)
        E.g. one spectrum, (n_walkers, n_in), or a whole grid (nT, ng, nm, n_in).

    Returns
    -------
    ndarray, shape (..., n_out)
    """
    flux = np.asarray(flux_in, dtype=float)
    n_out, n_in = matrix.shape
    if flux.shape[-1] != n_in:
        raise DataError(
            f"last axis should have {n_in} pixels but has {flux.shape[-1]}",
            column="flux_in",
            value=flux.shape,
        )
    lead = flux.shape[:-1]
    flat = flux.reshape(-1, n_in)
    out = np.asarray(matrix @ flat.T).T
    return np.ascontiguousarray(out).reshape(*lead, n_out)


def convolve_resample(wave_in, flux_in, wave_out, *, resolution=None, fwhm_A=None):
    """Convolve with a Gaussian LSF and resample onto ``wave_out``.

    Parameters
    ----------
    wave_in : array_like, shape (n_in,)
        Input wavelengths [Angstrom].
    flux_in : array_like, shape (..., n_in)
        F_lambda [erg s^-1 cm^-2 A^-1] (any leading batch shape).
    wave_out : array_like, shape (n_out,)
        Output wavelengths [Angstrom].
    resolution, fwhm_A
        See :func:`lsf_matrix`.

    Returns
    -------
    ndarray, shape (..., n_out)
        To reuse the matrix for many calls, build it once with
        :func:`lsf_matrix` and use :func:`apply_lsf`.
    """
    matrix = lsf_matrix(wave_in, wave_out, resolution=resolution, fwhm_A=fwhm_A)
    return apply_lsf(matrix, flux_in)
