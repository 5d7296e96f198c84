"""Interpolation error of a photosphere grid, from leave-one-node-out residuals.

Along a parameter axis x with nodes x_{i-1} < x_i < x_{i+1} (spacings h1, h2), node i
is removed and predicted by linear interpolation of log10 F between its neighbours:

    d_i = [(h2 L_{i-1} + h1 L_{i+1}) / (h1 + h2)] - L_i          [dex]

If L is locally quadratic, L = a x^2 + (linear), the error of linear interpolation at
x between nodes x_a < x_b is exactly a (x - x_a)(x_b - x) (the classic remainder of
linear interpolation, f''/2 (x - x_a)(x_b - x); any numerical-analysis text, from
memory), so d_i = a h1 h2 and the curvature a = d_i / (h1 h2). The grid itself
interpolates over the real cells [x_{i-1}, x_i] and [x_i, x_{i+1}], which are half as
wide as the leave-one-out gap on a uniform axis, and the error grows as the square of
the cell width. So the residual is rescaled to the real cells:

``position="rms"`` (default)
    RMS of a (x - x_a)(x_b - x) over both real cells (uniform in x):
    |a| sqrt((h1^5 + h2^5) / (30 (h1 + h2))). On a uniform axis this is
    d_i / sqrt(30) = 0.183 d_i: the typical error at a random point, which is what
    a likelihood variance term should hold.
``position="midpoint"``
    the largest error, at the middle of the wider cell: |a| max(h1, h2)^2 / 4. On a
    uniform axis this is d_i / 4 (a quarter, not a half: the error is quadratic in
    the cell width).

The scaled dex error e is turned into a fractional flux error 10^e - 1. Edge nodes
and nodes next to a hole cannot be predicted and are skipped. With several axes the
per-axis errors are added in quadrature (treated as independent). Per pixel, the
summary is the RMS over all predicted nodes; it is used at every point of the grid,
including cells at the edges.
"""

import weakref

import numpy as np

from ..errors import GridError
from .grid import AXES, Grid

__all__ = ["interp_variance", "leave_one_out_error"]

_POSITIONS = ("rms", "midpoint")
_CACHE = weakref.WeakKeyDictionary()


def _axis_error(grid, axis, position):
    """Scaled signed dex error per node along ``axis``; NaN where not predictable."""
    k = AXES.index(axis)
    x = getattr(grid, axis)
    if x.size < 3:
        raise GridError(f"axis {axis!r} has {x.size} nodes; leaving one out needs at least 3")
    lf = np.moveaxis(np.asarray(grid.log_flux, dtype=float), k, 0)
    h1 = x[1:-1] - x[:-2]
    h2 = x[2:] - x[1:-1]
    shape = (-1,) + (1,) * (lf.ndim - 1)
    w = (h1 / (h1 + h2)).reshape(shape)
    d = (1.0 - w) * lf[:-2] + w * lf[2:] - lf[1:-1]
    curv = d / (h1 * h2).reshape(shape)
    if position == "rms":
        scale = np.sqrt((h1**5 + h2**5) / (30.0 * (h1 + h2)))
    else:
        scale = np.maximum(h1, h2) ** 2 / 4.0
    out = np.full(lf.shape, np.nan)
    out[1:-1] = curv * scale.reshape(shape)
    return np.moveaxis(out, 0, k)


def leave_one_out_error(grid, *, axes=("teff",), per_node=False, position="rms"):
    """Fractional interpolation error of ``grid`` from leave-one-node-out residuals.

    Parameters
    ----------
    grid : Grid
        The photosphere grid (log flux float32 or float64).
    axes : sequence of str
        Parameter axes to probe, from ``("teff", "logg", "mh")``; each needs >= 3 nodes.
    per_node : bool
        Return the error of every node (NaN where it cannot be predicted) instead of
        the per-pixel RMS.
    position : {"rms", "midpoint"}
        Rescaling to the real cells: RMS over the cells, or the largest (midpoint)
        error; see the module docstring for the factors.

    Returns
    -------
    ndarray
        Fractional flux error [dimensionless], shape (n_wave,), or, with ``per_node``,
        the shape of ``grid.log_flux``.
    """
    if position not in _POSITIONS:
        raise GridError(f"position should be one of {_POSITIONS} but got {position!r}")
    axes = (axes,) if isinstance(axes, str) else tuple(axes)
    if not axes:
        raise GridError("axes should name at least one of teff, logg, mh but is empty")
    for ax in axes:
        if ax not in AXES:
            raise GridError(f"axis should be one of {AXES} but got {ax!r}")
    if len(set(axes)) != len(axes):
        raise GridError(f"axes should not repeat but got {axes}")
    frac = [np.expm1(np.log(10.0) * _axis_error(grid, ax, position)) for ax in axes]
    if per_node:
        stack = np.stack(frac)
        var = np.nansum(stack**2, axis=0)
        return np.where(np.all(np.isnan(stack), axis=0), np.nan, np.sqrt(var))
    total = np.zeros(grid.wave.size)
    for ax, f in zip(axes, frac):
        f2 = f.reshape(-1, grid.wave.size) ** 2
        ok = np.isfinite(f2[:, 0])  # a node is present at all pixels or none (Grid checks)
        if not ok.any():
            raise GridError(f"no interior node along {ax!r} has both neighbours present; "
                            f"cannot estimate the interpolation error")
        total += f2[ok].mean(axis=0)
    return np.sqrt(total)


def interp_variance(grid, flux_model, **kwargs):
    """Extra likelihood variance ``(fractional error * model flux)^2``.

    Parameters
    ----------
    grid : Grid or array_like
        The grid (its :func:`leave_one_out_error` is computed once and cached, with
        ``kwargs`` passed on) or a precomputed fractional error, shape (n_wave,).
        The grid must be on the same pixels as ``flux_model`` (e.g. after
        :meth:`Grid.on_pixels`).
    flux_model : array_like
        Model flux, shape (..., n_wave), any flux unit.

    Returns
    -------
    ndarray
        Variance in the square of the flux unit, shape of ``flux_model``.
    """
    if isinstance(grid, Grid):
        key = tuple(sorted((k, str(v)) for k, v in kwargs.items()))
        per_grid = _CACHE.setdefault(grid, {})
        if key not in per_grid:
            per_grid[key] = leave_one_out_error(grid, **kwargs)
        frac = per_grid[key]
    else:
        frac = np.asarray(grid, dtype=float)
    flux_model = np.asarray(flux_model, dtype=float)
    if frac.ndim != 1 or flux_model.shape[-1:] != frac.shape:
        raise GridError(f"fractional error has shape {frac.shape} but the model flux has "
                        f"shape {flux_model.shape}; they should end in the same n_wave")
    return (frac * flux_model) ** 2
