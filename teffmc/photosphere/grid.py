"""The photosphere grid and its batch interpolation; its file (:mod:`.gridfile`).

A grid is one HDF5 file (readable by any HDF5 or netCDF-4 reader) holding

``teff`` [K], ``logg`` [cgs dex], ``mh`` [dex]
    ascending 1-D axes;
``wave`` [Angstrom, vacuum]
    ascending 1-D axis;
``log_flux`` [log10 erg s^-1 cm^-2 Angstrom^-1]
    float32 array (n_teff, n_logg, n_mh, n_wave) of surface F_lambda; NaN marks a
    node that the grid does not have (a hole);

and root attributes ``format`` (``"teffmc-grid"``), ``format_version``, ``name``,
``checksum`` (SHA-256 of the axes and flux bytes, checked on load) and
``provenance/<key>`` strings saying where the spectra came from.

Interpolation is multilinear in (Teff, log g, [M/H]) on log flux, exact at the
nodes, for a whole batch of points at once. A point outside the axes raises
:class:`~teffmc.errors.OffGridError`; a point whose surrounding cell touches a
hole raises it too (interpolation never silently crosses a hole).
"""

import hashlib
from dataclasses import dataclass, field, replace

import numpy as np

from ..errors import GridError, OffGridError
from .gridfile import AXES, FORMAT, grid_checksum, read_grid, write_grid
from .interp_kernel import corner_weights, weighted_rows

__all__ = ["Grid", "AXES", "FORMAT", "grid_checksum"]

_LN10 = np.log(10.0)
#: the most grid models a batch of walkers may touch for the dense interpolation product
_DENSE_MODELS = 64
#: walkers x pixels above which the dense product is used when there are nuisance terms
_DENSE_WORK = 100_000
#: grids on other pixels kept per grid (Grid.on_pixels)
_PIXEL_GRIDS = 4


def _check_axis(name, values):
    values = np.atleast_1d(np.asarray(values, dtype=float))
    if values.ndim != 1 or values.size == 0 or not np.all(np.isfinite(values)):
        raise GridError(f"grid axis {name!r} must be a finite 1-D array")
    if values.size > 1 and not np.all(np.diff(values) > 0):
        raise GridError(f"grid axis {name!r} must be strictly increasing")
    return values


@dataclass(frozen=True, eq=False)
class Grid:
    """A regular grid of model surface fluxes.

    Parameters
    ----------
    teff, logg, mh : array_like
        Ascending node values [K], [cgs dex], [dex].
    wave : array_like
        Ascending vacuum wavelengths [Angstrom].
    log_flux : array_like
        log10 surface F_lambda [erg s^-1 cm^-2 Angstrom^-1], shape
        (n_teff, n_logg, n_mh, n_wave); NaN marks a missing node.
    provenance : dict
        Free-form strings describing the origin of the spectra.
    name : str
        Short name shown in reports.
    """

    teff: np.ndarray
    logg: np.ndarray
    mh: np.ndarray
    wave: np.ndarray
    log_flux: np.ndarray
    provenance: dict = field(default_factory=dict)
    name: str = "grid"
    nuisance: tuple = ()   #: NuisanceAxis, see teffmc.photosphere.nuisance

    def __post_init__(self):
        for ax in (*AXES, "wave"):
            object.__setattr__(self, ax, _check_axis(ax, getattr(self, ax)))
        lf = np.asarray(self.log_flux)
        shape = (self.teff.size, self.logg.size, self.mh.size, self.wave.size)
        if lf.shape != shape:
            raise GridError(f"log_flux has shape {lf.shape}, expected {shape}")
        object.__setattr__(self, "log_flux", lf)
        object.__setattr__(self, "provenance", {str(k): str(v) for k, v in self.provenance.items()})
        nodes_ok = np.all(np.isfinite(lf), axis=-1)
        partial = np.any(np.isfinite(lf), axis=-1) & ~nodes_ok
        if np.any(partial):
            bad = tuple(int(i) for i in np.argwhere(partial)[0])
            raise GridError(f"node {self.node_params(bad)} has some non-finite fluxes")
        object.__setattr__(self, "_present", nodes_ok)
        object.__setattr__(self, "nuisance", tuple(self.nuisance))
        for a in self.nuisance:
            if np.shape(a.minus) != shape or np.shape(a.plus) != shape:
                raise GridError(f"nuisance {a.name}: cubes have shape {np.shape(a.minus)}, "
                                f"expected {shape}")

    @property
    def nuisance_names(self):
        """Names of the grid's nuisance axes (parameters ``<name>_scale``)."""
        return tuple(a.name for a in self.nuisance)

    # ------------------------------------------------------------------ description
    @property
    def bounds(self):
        """``{axis: (low, high)}`` of the three parameter axes."""
        return {ax: (float(getattr(self, ax)[0]), float(getattr(self, ax)[-1])) for ax in AXES}

    @property
    def holes(self):
        """List of ``(teff, logg, mh)`` nodes the grid does not have."""
        return [self.node_params(tuple(i)) for i in np.argwhere(~self._present)]

    def excluded_regions(self, box):
        """Parts of a parameter box that holes remove from the model.

        A hole removes every interpolation cell that has it as a corner (interpolation
        never crosses a hole). ``box``: ``{axis: (low, high)}`` for the three axes (a
        prior's support). Returns, for each hole whose cells overlap the box, a
        ``(node, region)`` pair: the missing node and ``{axis: (low, high)}`` of the
        excluded region clipped to the box.
        """
        out = []
        for idx in np.argwhere(~self._present):
            region = {}
            for ax, i in zip(AXES, idx):
                v, (blo, bhi) = getattr(self, ax), box[ax]
                if v.size == 1:
                    region[ax] = (float(v[0]), float(v[0]))
                    continue
                # the hole has weight on the open interval between its neighbours (closed
                # at the grid's edge): a point on a neighbour's face gives it weight 0
                lo, hi = v[max(i - 1, 0)], v[min(i + 1, v.size - 1)]
                lo_in, hi_in = i == 0, i == v.size - 1
                a, b = max(lo, blo), min(hi, bhi)
                if not (a < b or (a == b and (a > lo or lo_in) and (a < hi or hi_in))):
                    break
                region[ax] = (float(a), float(b))
            else:
                out.append((self.node_params(tuple(idx)), region))
        return out

    @property
    def checksum(self):
        """Return the SHA-256 hex digest of the axes and the flux (the grid's identity)."""
        return grid_checksum(self.teff, self.logg, self.mh, self.wave, self.log_flux)

    def node_params(self, index):
        """Return (teff [K], logg, mh) of the node at index ``(i, j, k)`` of the axes."""
        i, j, k = index
        return (float(self.teff[i]), float(self.logg[j]), float(self.mh[k]))

    def describe(self):
        """Return a few lines of text describing the grid (used by ``teffmc grid info``)."""
        lines = [f"name: {self.name}"]
        for ax, unit in zip(AXES, ("K", "dex", "dex")):
            v = getattr(self, ax)
            lines.append(f"{ax}: {v.size} nodes, {v[0]:g} .. {v[-1]:g} {unit}")
        w = self.wave
        rp = np.median(w[1:] / np.diff(w)) if w.size > 1 else float("nan")
        lines.append(f"wave: {w.size} pixels, {w[0]:.1f} .. {w[-1]:.1f} Angstrom (vacuum), "
                     f"median lambda/dlambda {rp:.0f}")
        lines.append(f"models: {int(self._present.sum())} present, {len(self.holes)} holes")
        lines.append(f"checksum: sha256:{self.checksum}")
        for a in self.nuisance:
            lines.append(f"nuisance: {a.parameter} (grid at scale {np.exp(-a.step):.3g} and "
                         f"{np.exp(a.step):.3g}; default prior log-uniform {a.low:g}-{a.high:g})")
        lines += [f"provenance.{k}: {v}" for k, v in sorted(self.provenance.items())]
        return "\n".join(lines)

    # ------------------------------------------------------------------ interpolation
    def check_inside(self, teff, logg, mh):
        """Boolean array: which points lie inside the axes and away from holes.

        A corner with zero weight (a point on the opposite face) does not count; the same
        compiled check as the interpolation (:func:`.interp_kernel.corner_weights`).
        """
        teff, logg, mh = np.broadcast_arrays(*(np.asarray(v, float) for v in (teff, logg, mh)))
        n = teff.size
        ok = corner_weights(self.teff, self.logg, self.mh, self._present.ravel(),
                            *(np.ascontiguousarray(v.ravel()) for v in (teff, logg, mh)),
                            np.empty((n, 8), np.int64), np.empty((n, 8)))
        return ok.reshape(teff.shape)

    def interpolate_log(self, teff, logg, mh, nuisance=None):
        """log10 surface flux at a batch of points, shape (n, n_wave).

        ``nuisance``: ``{name: x}`` with x = ln(scale) arrays (n,) for the grid's
        nuisance axes (missing names: nominal physics, x = 0).

        Raises
        ------
        OffGridError
            If any point lies outside the grid or in a cell touching a hole.
        """
        out, ok = self.interpolate_log_masked(teff, logg, mh, nuisance)
        if not ok.all():
            k = int(np.argmin(ok))
            teff, logg, mh = np.broadcast_arrays(*(np.atleast_1d(np.asarray(v, float))
                                                   for v in (teff, logg, mh)))
            raise OffGridError({"teff": teff[k], "logg": logg[k], "mh": mh[k]}, self.bounds)
        return out

    def interpolate_log_masked(self, teff, logg, mh, nuisance=None):
        """Return (log10 surface flux (n, n_wave), inside (n,)): NaN rows where not inside.

        As :meth:`interpolate_log` without raising: a point outside the axes or in a cell
        touching a hole gets a row of NaN and ``inside`` False (:meth:`check_inside`).
        """
        teff, logg, mh = np.broadcast_arrays(*(np.atleast_1d(np.asarray(v, float))
                                               for v in (teff, logg, mh)))
        n = teff.size
        # the terms of the log flux: log10 F, then x D1 and x^2 (D2 / 2) per nuisance axis
        # sampled (rows of _stack); an axis not sampled has x = 0 and is left out
        terms, powers = [0], [np.ones(n)]
        for q, a in enumerate(self.nuisance):
            x = None if nuisance is None else nuisance.get(a.name)
            if x is not None:
                x = np.broadcast_to(np.asarray(x, float), (n,))
                terms += [1 + 2 * q, 2 + 2 * q]
                powers += [x, x * x]
        idx, wts = np.empty((n, 8), np.int64), np.empty((n, 8))
        ok = corner_weights(self.teff, self.logg, self.mh, self._present.ravel(),
                            *(np.ascontiguousarray(v.ravel()) for v in (teff, logg, mh)),
                            idx, wts)
        terms, powers = np.asarray(terms, np.int64), np.stack(powers, axis=1)
        stack = self._stack()
        if terms.size > 1 and n * self.wave.size > _DENSE_WORK:
            # with nuisance terms, many walkers and pixels: walkers clustered in a few
            # cells share rows, and a dense (n x models*terms) weight matrix times the
            # gathered rows is one BLAS product that keeps them in cache (the standard
            # problem of bench/bench_speed.py: 0.83 vs 1.17 ms for its spectrum)
            keep = wts != 0.0                    # zero-weight corners may be holes (NaN)
            models, col = np.unique(idx[keep], return_inverse=True)
            if models.size <= _DENSE_MODELS:
                w = np.bincount(np.nonzero(keep)[0] * models.size + col, wts[keep],
                                minlength=n * models.size).reshape(n, -1)
                coef = (w[:, :, None] * powers[:, None, :]).reshape(n, -1)
                rows = stack[models[:, None], terms[None, :]].reshape(-1, self.wave.size)
                out = coef @ rows
                out[~ok] = np.nan
                return out, ok
        # one compiled pass per point: no per-call set-up cost (faster below the
        # threshold; spread walkers early in burn-in)
        out = np.empty((n, self.wave.size))
        weighted_rows(stack, terms, idx, wts, powers, out)
        out[~ok] = np.nan
        return out, ok

    def _stack(self):
        """Stack log10 F, then D1 and D2 / 2 of each nuisance axis, made once.

        Shape (n_models, 1 + 2 n_nuisance, n_wave), float64
        (teffmc.photosphere.nuisance.responses).
        """
        from .nuisance import responses

        stack = self.__dict__.get("_term_stack")
        if stack is None:
            nw = self.wave.size
            stack = np.empty((self.log_flux[..., 0].size, 1 + 2 * len(self.nuisance), nw))
            stack[:, 0] = self.log_flux.reshape(-1, nw)
            for q, a in enumerate(self.nuisance):
                d1, d2 = responses(stack[:, 0], _Flat(a, nw))
                stack[:, 1 + 2 * q] = d1
                stack[:, 2 + 2 * q] = 0.5 * d2
            object.__setattr__(self, "_term_stack", stack)
        return stack

    def interpolate(self, teff, logg, mh, nuisance=None):
        """Surface F_lambda [erg s^-1 cm^-2 Angstrom^-1] at a batch of points, (n, n_wave)."""
        out = self.interpolate_log(teff, logg, mh, nuisance)
        out *= _LN10            # exp(ln 10 x) is ~4x faster than 10 ** x
        return np.exp(out, out=out)

    def spectrum(self, teff, logg=0.0, mh=0.0):
        """One spectrum: ``(wave [Angstrom, vacuum], surface F_lambda)``."""
        return self.wave.copy(), self.interpolate(teff, logg, mh)[0]

    # ------------------------------------------------------------------ resampling
    def on_pixels(self, wave, *, resolution=None, fwhm_A=None, average=False):
        """Return a new grid on the pixels ``wave`` [Angstrom, vacuum].

        The flux is convolved with a Gaussian line-spread function of resolving power
        ``resolution`` (or FWHM ``fwhm_A``) and resampled, once for all nodes: this is
        the per-run precomputation, so that sampling only interpolates on the pixels.
        ``average=True`` instead takes hat-weighted means of the flux around each pixel
        (:func:`teffmc.observe.lsf.hat_average_matrix`: coarse pixels for broad bands).
        """
        wave = np.asarray(wave, float)
        if wave[0] < self.wave[0] or wave[-1] > self.wave[-1]:
            raise GridError(
                f"grid {self.name!r} covers {self.wave[0]:.1f}-{self.wave[-1]:.1f} Angstrom "
                f"but the data need {wave[0]:.1f}-{wave[-1]:.1f} Angstrom")
        # the last few grids made are kept on this grid: the stars of a survey observed
        # alike (same pixels and resolution) share them, and their interpolation stacks
        key = (hashlib.sha256(wave.tobytes()).hexdigest(), resolution, fwhm_A, bool(average))
        cache = self.__dict__.setdefault("_pixel_grids", {})
        if key not in cache:
            if len(cache) >= _PIXEL_GRIDS:
                cache.pop(next(iter(cache)))
            cache[key] = self._made_on_pixels(wave, resolution, fwhm_A, average)
        return cache[key]

    def _made_on_pixels(self, wave, resolution, fwhm_A, average):
        """Compute the grid of :meth:`on_pixels` (not cached)."""
        if average:
            from ..observe.lsf import hat_average_matrix

            matrix = hat_average_matrix(self.wave, wave)

            def cube(lf):
                return self._cube_through(lf, matrix)
        else:
            def cube(lf):
                return self._cube_on_pixels(lf, wave, resolution, fwhm_A)

        axes = tuple(replace(a, minus=cube(a.minus), plus=cube(a.plus)) for a in self.nuisance)
        return Grid(self.teff, self.logg, self.mh, wave, cube(self.log_flux), self.provenance,
                    self.name, axes)

    def _cube_on_pixels(self, log_flux, wave, resolution, fwhm_A):
        """One (n_teff, n_logg, n_mh, n_wave) log-flux cube on the pixels ``wave``."""
        from ..observe.lsf import lsf_matrix

        if resolution is None and fwhm_A is None:
            # no line-spread function: slice when the pixels are the grid's own,
            # else interpolate log flux linearly in wavelength
            i = np.searchsorted(self.wave, wave)
            if np.array_equal(self.wave[np.minimum(i, self.wave.size - 1)], wave):
                return log_flux[..., i]
            j = np.clip(i - 1, 0, self.wave.size - 2)
            w = (wave - self.wave[j]) / (self.wave[j + 1] - self.wave[j])
            return (1 - w) * log_flux[..., j] + w * log_flux[..., j + 1]
        return self._cube_through(log_flux, lsf_matrix(self.wave, wave, resolution=resolution,
                                                       fwhm_A=fwhm_A))

    @staticmethod
    def _cube_through(log_flux, matrix):
        """Apply a (n_out, n_wave) matrix to the flux (not its log) of every node."""
        from ..observe.lsf import apply_lsf

        present = np.all(np.isfinite(log_flux), axis=-1)
        flux = np.where(present[..., None], 10.0 ** np.asarray(log_flux, float), 1.0)
        res = apply_lsf(matrix, flux)
        return np.where(present[..., None], np.log10(res), np.nan)

    # ------------------------------------------------------------------ file I/O
    def write(self, path):
        """Write the grid to ``path`` (:func:`teffmc.photosphere.gridfile.write_grid`)."""
        write_grid(self, path)

    @classmethod
    def read(cls, path):
        """Read a grid file written by :meth:`write`, verifying its checksum.

        See :func:`teffmc.photosphere.gridfile.read_grid`.
        """
        return read_grid(path, cls)


class _Flat:
    """A nuisance axis with its cubes viewed as (n_models, n_wave) float64 matrices."""

    def __init__(self, axis, n_wave):
        self.step = axis.step
        self.minus = np.asarray(axis.minus, float).reshape(-1, n_wave)
        self.plus = np.asarray(axis.plus, float).reshape(-1, n_wave)
