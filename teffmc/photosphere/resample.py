"""Resampling model spectra onto a common wavelength axis (used by the grid importer).

:func:`log_uniform_overlap` builds the axis (the overlap of all spectra, uniform in
ln(lambda) with the finest step among them); :func:`rebin_flux_conserving` moves a flux
onto it without losing flux between samples (the mean of the piecewise-linear model over
each output pixel's extent).
"""

import numpy as np

from ..errors import GridError

__all__ = ["log_uniform_overlap", "rebin_flux_conserving", "MAX_PIXELS"]

# Refuse to build a wavelength axis longer than this (memory guard, no source).
MAX_PIXELS = 5_000_000


def log_uniform_overlap(waves):
    """Overlap of the axes ``waves``, log-uniform with the finest median ln-step among them."""
    lo = max(float(w[0]) for w in waves)
    hi = min(float(w[-1]) for w in waves)
    if not hi > lo:
        raise GridError(f"the model spectra have no common wavelength range "
                        f"(latest start {lo:.6g} A, earliest end {hi:.6g} A)")
    steps = []
    for w in waves:
        inside = w[(w >= lo) & (w <= hi)]
        d = np.diff(np.log(inside if inside.size > 1 else w))
        steps.append(float(np.median(d)))
    span = np.log(hi / lo)
    n = int(np.ceil(span / min(steps) - 1e-9)) + 1
    if n > MAX_PIXELS:
        raise GridError(f"the common axis would have {n} pixels (> {MAX_PIXELS}); pass wave=")
    out = lo * np.exp(np.linspace(0.0, span, max(n, 2)))
    out[0], out[-1] = lo, hi
    return out


def rebin_flux_conserving(wave_in, flux_in, wave_out):
    """Mean of the piecewise-linear ``flux_in`` over each output pixel's extent.

    Pixel edges lie midway between output pixels (half a pixel beyond the ends). Where
    an edge falls outside ``wave_in`` the pixel's extent is shrunk symmetrically about
    the pixel (so the mean stays centred on it; a pixel exactly at an end of
    ``wave_in`` gets the end value). ``wave_out`` must lie inside ``wave_in``. Works on
    the last axis of ``flux_in``.
    """
    x = np.asarray(wave_in, float)
    y = np.asarray(flux_in, float)
    xo = np.asarray(wave_out, float)
    if xo.size == 1:
        return np.interp(xo, x, y)
    mid = 0.5 * (xo[1:] + xo[:-1])
    lo = np.concatenate([[2.0 * xo[0] - mid[0]], mid])
    hi = np.concatenate([mid, [2.0 * xo[-1] - mid[-1]]])
    clipped = (lo < x[0]) | (hi > x[-1])
    a = xo - np.maximum(lo, x[0])
    b = np.minimum(hi, x[-1]) - xo
    a, b = np.where(clipped, np.minimum(a, b), a), np.where(clipped, np.minimum(a, b), b)
    cum = np.concatenate([np.zeros((*y.shape[:-1], 1)),
                          np.cumsum(0.5 * (y[..., 1:] + y[..., :-1]) * np.diff(x), axis=-1)],
                         axis=-1)

    def integral(e):
        i = np.clip(np.searchsorted(x, e, side="right") - 1, 0, x.size - 2)
        dx = e - x[i]
        slope = (y[..., i + 1] - y[..., i]) / (x[i + 1] - x[i])
        return cum[..., i] + y[..., i] * dx + 0.5 * slope * dx**2

    width = a + b
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = (integral(xo + b) - integral(xo - a)) / width
    end_value = np.where(xo <= x[0], y[..., :1], y[..., -1:])  # zero width: xo is an end
    return np.where(width > 0, mean, end_value)
