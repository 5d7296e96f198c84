"""Mie efficiencies tabulated once on (grain radius x pixel), cached on disk.

The efficiencies of a sphere depend only on the refractive index m and the size
parameter x = 2 pi a / lambda. The table therefore computes Q(m, x) on one fine
grid in x per refractive-index node (the radius and wavelength axes collapse into
x), averages over the size distribution there, and reads every (radius, pixel)
pair off that curve. Refractive-index nodes are spaced so that |m| changes by at
most ``DM_TOL`` between them; pixels blend their two nodes linearly.
"""

from importlib.metadata import PackageNotFoundError, version

import numpy as np

from teffmc.dust import cache
from teffmc.dust._interp import RowInterpolator
from teffmc.dust._wave import as_wave_aa
from teffmc.dust.materials import get_material
from teffmc.dust.mie import _check_spread, cone_fraction, efficiencies, lognormal_weights
from teffmc.errors import ConfigError

__all__ = ["MieTable", "interp_log_radius", "RADIUS_RANGE"]

#: Fine x grid: uniform in ln x with step ``H_LN`` up to x = DX / H_LN, then uniform in x
#: with step ``DX`` (single size: finer). Chosen so the table agrees with the direct
#: calculation to ~1e-3 (tests/test_dust_mie.py); common practice, no source.
H_LN = {True: 0.002 * np.log(10.0), False: 0.0005 * np.log(10.0)}  # key: spread > 0
DX = {True: 0.4, False: 0.05}
#: Largest change of the refractive index between two m-nodes.
DM_TOL = {True: 0.02, False: 0.002}
#: Output step in ln x of the size-averaged curve (it is smooth on the spread's scale).
H_OUT = 0.0005 * np.log(10.0)
#: Step in ln x of the forward-cone fraction, interpolated onto the fine grid (the cone
#: fraction is far smoother in x than Q; agreement with the direct calculation is
#: checked in tests/test_dust_veil.py).
H_CONE = 0.01 * np.log(10.0)
_FORMAT = 2  # bump when the table layout or algorithm changes
#: grain radii [micron] the optics table covers by default (a prior must stay inside)
RADIUS_RANGE = (0.01, 10.0)


def _fine_x(x_lo, x_hi, h_ln, dx):
    """Size parameters from x_lo to x_hi: log-spaced, then linear above dx / h_ln."""
    x_c = dx / h_ln
    parts = []
    if x_lo < x_c:
        top = min(x_hi, x_c)
        n = max(int(np.ceil(np.log(top / x_lo) / h_ln)), 1) + 1
        parts.append(np.exp(np.linspace(np.log(x_lo), np.log(top), n)))
    if x_hi > x_c:
        start = max(x_lo, x_c)
        n = max(int(np.ceil((x_hi - start) / dx)), 1) + 1
        parts.append(np.linspace(start, x_hi, n)[1 if parts else 0:])
    return np.concatenate(parts)


def _trapezoid_widths(t):
    d = np.empty_like(t)
    d[1:-1] = 0.5 * (t[2:] - t[:-2])
    d[0], d[-1] = 0.5 * (t[1] - t[0]), 0.5 * (t[-1] - t[-2])
    return d


def _curve_of_x(m, x_lo, x_hi, spread_dex, cone_deg=None):
    """Tabulate the efficiencies on a grid of ln x (x the size parameter).

    Returns the ln x grid and (Q_ext, Q_sca, Q_sca g, Q_sca P_cone) on it, size-averaged
    when spread_dex > 0. The last entry is None without ``cone_deg``.
    """
    spread = spread_dex > 0
    sig = spread_dex * np.log(10.0)
    xf = _fine_x(x_lo * np.exp(-5 * sig), x_hi * np.exp(5 * sig), H_LN[spread], DX[spread])
    q_ext, q_sca, g = efficiencies(m, xf)
    ln_f = np.log(xf)
    cols = [q_ext, q_sca, q_sca * g]
    if cone_deg is not None:
        ln_c = np.linspace(ln_f[0], ln_f[-1], int(np.ceil((ln_f[-1] - ln_f[0]) / H_CONE)) + 1)
        cols.append(q_sca * np.interp(ln_f, ln_c, cone_fraction(m, np.exp(ln_c), cone_deg)))
    if not spread:
        return (ln_f, *cols) + ((None,) if cone_deg is None else ())
    ln_o = np.linspace(np.log(x_lo), np.log(x_hi), int(np.log(x_hi / x_lo) / H_OUT) + 2)
    d_ln = _trapezoid_widths(ln_f)
    qs = np.stack(cols, axis=1)  # (n_fine, 3 or 4)
    avg = np.empty((ln_o.size, qs.shape[1]))
    for s in range(0, ln_o.size, 256):
        w = lognormal_weights(ln_f[None, :], ln_o[s:s + 256, None], spread_dex, d_ln[None, :])
        avg[s:s + 256] = w @ qs
    cone = avg[:, 3] if cone_deg is not None else None
    return ln_o, avg[:, 0], avg[:, 1], avg[:, 2], cone


def _m_nodes(mat, wave):
    """Refractive-index nodes and each pixel's (lower node, weight of the upper one)."""
    order = np.argsort(wave)
    m = mat.refractive_index(wave[order])
    path = np.concatenate([[0.0], np.cumsum(np.abs(np.diff(m)))])
    return order, path, m


def log_radius(ln_grid, radius, key="grain_radius"):
    """Return ln of a batch of radii [micron], checked against the table's range.

    Raises ConfigError (naming ``key``) for a radius outside the table.
    """
    r = np.atleast_1d(np.asarray(radius, dtype=np.float64))
    lo, hi = np.exp(ln_grid[0]), np.exp(ln_grid[-1])
    bad = ~((r >= lo * (1 - 1e-12)) & (r <= hi * (1 + 1e-12)))
    if bad.any():
        raise ConfigError(
            f"{key} should be in [{lo:g}, {hi:g}] micron (the table) but got {r[bad][0]:g}",
            key=key, value=float(r[bad][0]),
        )
    return np.clip(np.log(r), ln_grid[0], ln_grid[-1])


def interp_log_radius(ln_grid, table, radius, key="grain_radius", out=None):
    """Interpolate rows of ``table`` linearly in ln radius for a batch of radii.

    Parameters
    ----------
    ln_grid : numpy.ndarray, shape (n_radius,)
        ln of the tabulated radii [ln micron], ascending.
    table : numpy.ndarray or RowInterpolator, shape (n_radius, n_pix)
        The table, or a :class:`~teffmc.dust._interp.RowInterpolator` over
        ``ln_grid`` (faster for repeated calls).
    radius : array_like, shape (n,)
        Radii [micron] inside the tabulated range.
    key : str
        Parameter name for the error message.
    out : numpy.ndarray, optional
        Where to write the result (RowInterpolator only).

    Returns
    -------
    numpy.ndarray, shape (n, n_pix)

    Raises
    ------
    ConfigError
        A radius outside the tabulated range.
    """
    t = log_radius(ln_grid, radius, key)
    if isinstance(table, RowInterpolator):
        return table(t, out=out)
    i = np.clip(np.searchsorted(ln_grid, t, side="right") - 1, 0, ln_grid.size - 2)
    w = ((t - ln_grid[i]) / (ln_grid[i + 1] - ln_grid[i]))[:, None]
    return table[i] + w * (table[i + 1] - table[i])


class MieTable:
    """Q_ext, Q_sca, albedo and asymmetry of one material on (radius, pixel).

    Parameters
    ----------
    material : str or Material
        Grain material (see :data:`teffmc.dust.materials.MATERIALS`).
    wave : array_like or astropy.units.Quantity
        Vacuum wavelengths [Angstrom] of the pixels.
    spread_dex : float
        Width of the log-normal size distribution [dex] around each tabulated
        radius; 0 for single sizes.
    radius_range : tuple of float
        (smallest, largest) radius [micron].
    n_radius : int, optional
        Number of radii, log-spaced; default 50 per decade (the Mie cost does not
        depend on it; linear interpolation in ln a then errs by < ~1e-3 with a 0.1 dex
        spread).
    use_cache : bool
        Read and write the on-disk cache (:mod:`teffmc.dust.cache`).
    cone_deg : float, optional
        Also tabulate ``table_q_cone`` = <Q_sca P(theta <= cone_deg)>, the scattering
        efficiency times the fraction of the scattered light within that half-angle of
        the forward direction (Mie phase function, :func:`teffmc.dust.mie.cone_fraction`).

    Notes
    -----
    With ``spread_dex`` = 0 the fine x grid (step 0.05 above x = 43) follows the
    broad interference structure but not the narrowest resonance ripples of
    weakly absorbing grains at large x; use a spread for such grains. The radius
    axis is interpolated linearly in ln a -- ln Q_ext and ln Q_sca (exact for the
    power laws of small grains), g itself -- so single-size tables with ripples
    need a dense ``n_radius``.
    """

    def __init__(self, material, wave, spread_dex=0.0, radius_range=RADIUS_RANGE,
                 n_radius=None, use_cache=True, cone_deg=None):
        self.material = get_material(material)
        self.cone_deg = None if cone_deg is None else float(cone_deg)
        self.wave = as_wave_aa(wave)
        self.spread_dex = _check_spread(spread_dex)
        lo, hi = (float(v) for v in radius_range)
        if not (0 < lo < hi and np.isfinite(hi)):
            raise ConfigError(f"radius_range should be 0 < low < high but got {radius_range}",
                              key="radius_range")
        if n_radius is None:
            n_radius = int(np.ceil(50 * np.log10(hi / lo))) + 1
        if int(n_radius) < 2:
            raise ConfigError(f"n_radius should be >= 2 but got {n_radius}", key="n_radius")
        self.radius = np.geomspace(lo, hi, int(n_radius))
        self._ln_r = np.log(self.radius)
        key = cache.cache_key("MieTable", _FORMAT, self.material.key, self.wave,
                              self.spread_dex, self.radius, self.cone_deg, _versions())
        data = cache.load("mie", key) if use_cache else None
        if data is None or data["q_ext"].shape != (self.radius.size, self.wave.size):
            data = self._compute()
            if use_cache:
                cache.save("mie", key, data)
        self.table_q_ext, self.table_q_sca, self.table_g = data["q_ext"], data["q_sca"], data["g"]
        self.table_q_cone = data.get("q_cone")
        tiny = np.finfo(float).tiny
        self._ln_q_ext = np.log(np.maximum(self.table_q_ext, tiny))
        self._ln_q_sca = np.log(np.maximum(self.table_q_sca, tiny))

    def _compute(self):
        spread = self.spread_dex > 0
        order, path, _ = _m_nodes(self.material, self.wave)
        lam = self.wave[order] * 1e-4  # [micron]
        n_seg = max(int(np.ceil(path[-1] / DM_TOL[spread])), 1)
        t = path / (path[-1] / n_seg) if path[-1] > 0 else np.zeros_like(path)
        k_lo = np.clip(np.floor(t).astype(int), 0, n_seg - 1)
        w_up = t - k_lo
        node_lam = np.interp(np.arange(n_seg + 1), t, lam) if path[-1] > 0 else lam[:1]
        node_m = self.material.refractive_index(node_lam * 1e4)
        two_pi_a = 2 * np.pi * self.radius[:, None]
        names = ("q_ext", "q_sca", "gs") + (() if self.cone_deg is None else ("q_cone",))
        out = {q: np.zeros((self.radius.size, self.wave.size)) for q in names}
        for k, mk in enumerate(node_m):
            use = (k_lo == k) | (k_lo == k - 1)
            if not use.any():
                continue
            wk = np.where(k_lo[use] == k, 1.0 - w_up[use], w_up[use])
            ln_x = np.log(two_pi_a / lam[use][None, :])
            x_lo, x_hi = np.exp(ln_x.min()), np.exp(ln_x.max())
            ln_g, *curves = _curve_of_x(mk, x_lo * 0.999, x_hi * 1.001, self.spread_dex,
                                        self.cone_deg)
            cols = order[use]
            for name, v in zip(names, curves):
                out[name][:, cols] += wk * np.interp(ln_x, ln_g, v)
        gs = out.pop("gs")
        out["g"] = np.divide(gs, out["q_sca"], out=np.zeros_like(gs), where=out["q_sca"] > 0)
        return out

    def _lookup(self, table, radius):
        return interp_log_radius(self._ln_r, table, radius)

    def q_ext(self, radius):
        """Extinction efficiency, shape (n, n_pix), for radii [micron] of shape (n,)."""
        return np.exp(self._lookup(self._ln_q_ext, radius))

    def q_sca(self, radius):
        """Scattering efficiency, shape (n, n_pix), for radii [micron] of shape (n,)."""
        return np.exp(self._lookup(self._ln_q_sca, radius))

    def albedo(self, radius):
        """Single-scattering albedo Q_sca / Q_ext, shape (n, n_pix)."""
        return self.q_sca(radius) / self.q_ext(radius)

    def asymmetry(self, radius):
        """Asymmetry parameter g = <cos theta>, shape (n, n_pix)."""
        return self._lookup(self.table_g, radius)


def _versions():
    out = []
    for pkg in ("teffmc", "miepython"):
        try:
            out.append(version(pkg))
        except PackageNotFoundError:
            out.append("unknown")
    return tuple(out)
