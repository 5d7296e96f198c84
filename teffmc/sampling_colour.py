"""Colour coordinates: theta and A_V sampled as a synthetic V magnitude and V - Ks colour.

A single-epoch fit's photometry pins down, for each (Teff, log g, [M/H]), the angular
diameter and the extinction through the star's brightness and colour; in (theta, A_V)
that constraint is a thin ridge that curves with log g and [M/H] through the grid's
bolometric corrections, and the ensemble's straight-line moves cross it slowly. In

    V = V0(Teff, g, m) - 5 log10(theta / 1 mas) + k_V A_V,
    C = C0(Teff, g, m) + (k_V - k_K) A_V,

with V0 and C0 = V0 - Ks0 the grid's synthetic magnitudes at theta = 1 mas and A_V = 0
(multilinear in the grid's nodes) and k_V, k_K the band extinctions per magnitude of A_V
(measured on the same model), the ridge is nearly straight: V and C are what the data
measure. The map (Teff, g, m, ln theta, A_V) -> (Teff, g, m, V, C) is triangular with
the constant determinant (5 / ln 10) (k_V - k_K), so the priors stay those on theta and
A_V (the Jacobian is carried by :class:`teffmc.sampling_coords.SamplerCoordinates`).
Measured on three simulated survey stars with the default terms (3810, 4170, 4108 K;
8000 steps, same seeds): the largest tau fell from 577 / 639 / 482 steps to
238 / 344 / 282 (DEVELOPERS.md, sampler coordinates).
"""

import math

import numpy as np

__all__ = ["ColourTable", "colour_table", "table_for"]

BANDS = ("bessell-V", "twomass-Ks")
_CACHE = {}   # (grid checksum, r_v) -> ColourTable: ~2 s to build for the built-in grid


class ColourTable:
    """V0 and C0 over the grid's nodes, and the two extinction coefficients.

    Parameters
    ----------
    grid : teffmc.photosphere.Grid
        A grid with two "pixels" holding V0 and C0 as its log flux (NaN where the
        photosphere grid has a hole), interpolated by its own multilinear rule.
    k_v, k_k : float
        A_band / A_V of the two bands.
    """

    def __init__(self, grid, k_v, k_k):
        self.grid, self.k_v, self.k_k = grid, float(k_v), float(k_k)
        self.log_det = math.log(math.log(10.0) / 5.0) - math.log(self.k_v - self.k_k)

    def v0_c0(self, teff, logg, mh):
        """Return (V0, C0, inside): NaN and False where the point is off the grid."""
        teff, logg, mh = np.broadcast_arrays(*(np.asarray(v, float) for v in (teff, logg, mh)))
        out, ok = self.grid.interpolate_log_masked(teff, logg, mh)
        shape = teff.shape
        return out[:, 0].reshape(shape), out[:, 1].reshape(shape), ok.reshape(shape)

    def to_theta_av(self, teff, logg, mh, v, c):
        """Return (ln theta, A_V) from (V, C); NaN off the grid."""
        v0, c0, _ = self.v0_c0(teff, logg, mh)
        a_v = (c - c0) / (self.k_v - self.k_k)
        return -(v - v0 - self.k_v * a_v) * math.log(10.0) / 5.0, a_v

    def to_v_c(self, teff, logg, mh, ln_theta, a_v):
        """Return (V, C) from (ln theta, A_V); NaN off the grid."""
        v0, c0, _ = self.v0_c0(teff, logg, mh)
        v = v0 - 5.0 * ln_theta / math.log(10.0) + self.k_v * a_v
        return v, c0 + (self.k_v - self.k_k) * a_v


def table_for(space, grid):
    """Return the grid's colour table when the colour coordinates could apply, else None.

    They need teff, theta and a_v among the sampled parameters (the finer conditions are
    checked by :class:`teffmc.sampling_coords.SamplerCoordinates`).
    """
    if not {"teff", "theta", "a_v"} <= set(space.names):
        return None
    return colour_table(grid)


def colour_table(grid, r_v=3.1):
    """Build the :class:`ColourTable` of a photosphere grid, or None where it cannot be.

    None for an analytic photosphere (no nodes) or a grid that does not cover V and Ks.
    The magnitudes are the photometry channel's own (hat-averaged pixels, Vega system,
    the default CCM89 law at ``r_v``). Kept per grid checksum, so the stars of a batch
    share one table per worker.
    """
    if not hasattr(grid, "log_flux"):
        return None
    key = (grid.checksum, float(r_v))
    if key not in _CACHE:
        if len(_CACHE) >= 4:
            _CACHE.pop(next(iter(_CACHE)))
        _CACHE[key] = _build(grid, r_v)
    return _CACHE[key]


def _build(grid, r_v):
    """Compute the table of :func:`colour_table` (None when the grid misses V or Ks)."""
    from .config import ModelSpec
    from .errors import TeffmcError
    from .model import PhotometryChannel
    from .observe.photometry import make_photometry
    from .photosphere import Grid
    from .priors import Prior

    try:
        phot = make_photometry(list(BANDS), np.zeros(2), np.full(2, 0.02), ["vega"] * 2)
        chan = PhotometryChannel(phot, grid, ModelSpec(grid_nuisance=False),
                                 Prior("fixed", value=r_v))
    except TeffmcError:
        return None
    present = np.all(np.isfinite(grid.log_flux), axis=-1)   # nodes that are not holes
    tt, gg, mm = np.meshgrid(grid.teff, grid.logg, grid.mh, indexing="ij")
    n = int(present.sum())

    def mags(a_v):
        p = {"teff": tt[present], "logg": gg[present], "mh": mm[present],
             "theta": np.ones(n), "a_v": np.full(n, a_v), "r_v": np.full(n, r_v)}
        return chan.predict(p)

    m0, m1 = mags(0.0), mags(1.0)
    k_v, k_k = np.median(m1 - m0, axis=0)
    cube = np.full(present.shape + (2,), np.nan)
    cube[present] = np.column_stack([m0[:, 0], m0[:, 0] - m0[:, 1]])
    table = Grid(grid.teff, grid.logg, grid.mh, np.array([1.0, 2.0]), cube,
                 name="colour table")
    return ColourTable(table, k_v, k_k)
