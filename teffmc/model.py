"""The forward model: parameters -> predicted spectra and photometry.

For every observed data set ("channel") everything that does not depend on the
parameters is computed once: the photosphere grid convolved and resampled to the
spectrum's pixels, the extinction curve and the veil's grain optics on those pixels,
the filter weight matrices. One call then costs a grid interpolation and a few array
products for the whole batch of walkers.

Observed flux (Notes)::

    F_obs(lambda) = (theta/2)^2 * F_surf(lambda) * 10^(sum_i L_i(lambda)) * prod_j V_j(lambda)

with ``theta`` the angular diameter [rad], ``F_surf`` the surface flux of the
photosphere (mixed by area with the surface regions, e.g. cool patches), ``L_i`` the
log10 transmissions (interstellar extinction ``-0.4 A_V k(lambda; R_V)``) and ``V_j`` the
factors (the circumstellar veil) of the model's components. The components -- their
parameters, tables and evaluation -- live in :mod:`teffmc.components`; this module only
composes the registered ones (:class:`Terms`, :func:`observed_flux`).
"""

import numpy as np

from .components import COMPONENTS, regions
from .constants import C_KMS
from .likelihood.mismatch import _steps as _kernel_steps

__all__ = ["MAS_TO_RAD", "Terms", "surface_flux", "observed_flux", "band_pixels", "SpectrumChannel",
           "PhotometryChannel"]

MAS_TO_RAD = np.pi / (180.0 * 3600.0 * 1000.0)
PHOT_PIXEL_R = 700.0  # lambda/dlambda of the pixels used for synthetic photometry
#: a spectrum with more than this many times the grid's own pixels over its span is
#: modelled on the grid's pixels and resampled per call (not stored on its pixels)
FINE_DATA_FACTOR = 4.0


_LN10 = np.log(10.0)


def grid_nuisance(grid, p):
    """``{name: ln(scale)}`` of the grid's nuisance axes sampled in ``p`` (or None)."""
    out = {n: np.log(p[f"{n}_scale"]) for n in grid.nuisance_names if f"{n}_scale" in p}
    return out or None


def surface_flux(grid, p):
    """Surface flux (n, n_pix) of the photosphere for parameter arrays ``p``.

    With surface regions (:func:`teffmc.components.regions`: cool patches, ...), a
    fraction ``cover`` of the disc has its own effective temperature (same log g and
    [M/H]); all parts come from the same grid (and the same grid physics) and are mixed
    by area.
    """
    nuis = grid_nuisance(grid, p)
    f = grid.interpolate(p["teff"], p["logg"], p["mh"], nuis)
    reg = regions(p)
    if reg:
        cover = reg[0][0]
        for c, _ in reg[1:]:
            cover = cover + c
        f = (1.0 - cover[:, None]) * f
        for c, teff in reg:
            f += c[:, None] * grid.interpolate(teff, p["logg"], p["mh"], nuis)
    return f


class Terms:
    """The active components' tables on one wavelength set (made once per channel).

    ``log10`` and ``factors`` are ``[(evaluate, state), ...]`` of the components with a
    ``log10_transmission`` or a ``factor`` (:mod:`teffmc.components`), registry order;
    ``states`` is ``{component name: state}`` (e.g. ``states["veil"]``, a
    :class:`teffmc.dust.Veil`).
    """

    def __init__(self, wave, model, r_v_prior):
        self.log10, self.factors, self.states = [], [], {}
        for c in COMPONENTS:
            if hasattr(c, "setup") and c.active(model):
                state = c.setup(wave, model, r_v_prior)
                self.states[c.__name__.rpartition(".")[2]] = state
                if hasattr(c, "log10_transmission"):
                    self.log10.append((c.log10_transmission, state))
                else:
                    self.factors.append((c.factor, state))


def observed_flux(grid, terms, p):
    """Model flux at Earth (n, n_pix) [erg s^-1 cm^-2 Angstrom^-1].

    log10 of the surface flux, the components' log10 transmissions and of (theta/2)^2
    are summed and exponentiated once (one exp per pixel instead of powers and
    products); the components' factors multiply the result.
    """
    scale = (0.5 * p["theta"] * MAS_TO_RAD) ** 2
    if regions(p):                # several temperatures mix fluxes, not logs
        log = np.log10(surface_flux(grid, p))
    else:
        log = grid.interpolate_log(p["teff"], p["logg"], p["mh"], grid_nuisance(grid, p))
    for evaluate, state in terms.log10:
        log += evaluate(state, p)
    log += np.log10(scale)[:, None]
    log *= _LN10
    flux = np.exp(log, out=log)
    for evaluate, state in terms.factors:
        flux *= evaluate(state, p)
    return flux


class SpectrumChannel:
    """One observed spectrum with its precomputed model pieces.

    Parameters
    ----------
    spectrum : teffmc.observe.Spectrum
        Wavelength [Angstrom, vacuum], flux, error and mask (True = use).
    grid : Grid or BlackbodyGrid
        Photosphere on its native pixels.
    model : teffmc.config.ModelSpec
    r_v_prior : teffmc.priors.Prior
    resolution, fwhm_A : float, optional
        Line-spread function of the instrument.
    calibration_order : int
        Order of the multiplicative Legendre calibration polynomial (-1 = none).
    calibration_sigma : float
        Prior standard deviation of its coefficients.
    """

    kind = "spectrum"

    def __init__(self, spectrum, grid, model, r_v_prior, *, resolution=None, fwhm_A=None,
                 calibration_order=-1, calibration_sigma=0.2, name="spectrum",
                 interp_error=False, mismatch="none"):
        use = np.asarray(spectrum.mask, bool)
        self.name = name
        self.wave = np.asarray(spectrum.wave, float)[use]
        self.data = np.asarray(spectrum.flux, float)[use]
        self.err = np.asarray(spectrum.err, float)[use]
        # the model is evaluated on "work" pixels and mapped to the data's by ``resample``
        # (None: the work pixels are the data's own)
        self.resample, work = None, self.wave
        self.log_resample = resolution is None and fwhm_A is None
        native = _native_span(grid, self.wave, resolution, fwhm_A)
        if native is not None and native.size * FINE_DATA_FACTOR < self.wave.size:
            # data sampled much finer than the grid: keep the grid on its own pixels and
            # convolve-resample each prediction with one sparse matrix, instead of storing
            # every model on every data pixel (memory n_models x n_pixels; bench_memory)
            from .observe.lsf import lsf_matrix

            work = native
            self.grid = grid.on_pixels(native)
            self.resample = (lsf_matrix(native, self.wave, resolution=resolution,
                                        fwhm_A=fwhm_A).T.tocsr()
                             if resolution is not None or fwhm_A is not None
                             else _linear_matrix(native, self.wave).T.tocsr())
        else:
            full = grid.on_pixels(np.asarray(spectrum.wave, float), resolution=resolution,
                                  fwhm_A=fwhm_A)
            self.grid = full.on_pixels(self.wave) if not use.all() else full
        self.terms = Terms(work, model, r_v_prior)
        self.likelihood, self.student_nu = model.likelihood, model.student_nu
        # fractional interpolation error per pixel (leave-one-node-out), or None
        self.interp_frac = None
        if interp_error and hasattr(self.grid, "log_flux"):
            from .photosphere.interp_error import leave_one_out_error

            axes = tuple(a for a in ("teff", "logg", "mh") if getattr(self.grid, a).size >= 3)
            self.interp_frac = np.nan_to_num(leave_one_out_error(self.grid, axes=axes))
            if self.resample is not None:
                self.interp_frac = (self.interp_frac @ self.resample).ravel()
        # model-mismatch term (teffmc.likelihood.mismatch) and its kernel axis [km/s]
        self.mismatch = mismatch
        self.velocity = C_KMS * np.log(self.wave)
        self.kernel_steps = _kernel_steps(self.velocity)
        self.calibration_order = int(calibration_order)
        self.calibration_sigma = float(calibration_sigma)
        if self.calibration_order >= 0:
            span = max(self.wave[-1] - self.wave[0], 1e-300)
            x = 2.0 * (self.wave - self.wave[0]) / span - 1.0
            self.basis = np.polynomial.legendre.legvander(x, self.calibration_order).T
        else:
            self.basis = None

    @property
    def n_points(self):
        """Return the number of data points: the spectrum's pixels."""
        return self.wave.size

    def predict(self, p):
        """Model flux (n, n_pix) before the calibration polynomial."""
        flux = observed_flux(self.grid, self.terms, p)
        if self.resample is None:
            return flux
        if self.log_resample:  # no line-spread: interpolate log flux, as the grid does
            return np.exp(np.asarray(np.log(flux) @ self.resample))
        return np.asarray(flux @ self.resample)


def _native_span(grid, wave, resolution, fwhm_A):
    """Return the grid's own pixels covering ``wave`` with the line-spread's reach, or None.

    None for an analytic photosphere, which has no pixels of its own.
    """
    from .observe.lsf import FWHM_PER_SIGMA

    if not hasattr(grid, "log_flux"):
        return None
    gw = np.asarray(grid.wave, float)
    if resolution is not None:
        reach = 5.0 * wave[-1] / resolution / FWHM_PER_SIGMA
    else:
        reach = 5.0 * (fwhm_A or 0.0) / FWHM_PER_SIGMA
    i0 = max(int(np.searchsorted(gw, wave[0] - reach)) - 2, 0)
    i1 = min(int(np.searchsorted(gw, wave[-1] + reach)) + 2, gw.size)
    return gw[i0:i1]


def _linear_matrix(x, y):
    """Sparse (len(y), len(x)) matrix of linear interpolation from x to y (inside x)."""
    from scipy import sparse

    j = np.clip(np.searchsorted(x, y, side="right") - 1, 0, x.size - 2)
    w = (y - x[j]) / (x[j + 1] - x[j])
    rows = np.repeat(np.arange(y.size), 2)
    cols = np.stack([j, j + 1], axis=1).ravel()
    vals = np.stack([1.0 - w, w], axis=1).ravel()
    return sparse.csr_matrix((vals, (rows, cols)), shape=(y.size, x.size))


def band_pixels(grid_wave, bands, source=None):
    """Return the grid's own pixels spanning the given filters (one pixel margin each side).

    Raises DataError when the grid does not cover a filter.
    """
    from .errors import DataError
    from .observe.filters import get_filter

    spans = [get_filter(b).wave_range for b in bands]
    lo, hi = min(s[0] for s in spans), max(s[1] for s in spans)
    if lo < grid_wave[0] or hi > grid_wave[-1]:
        raise DataError(f"the photosphere grid covers {grid_wave[0]:.0f}-{grid_wave[-1]:.0f} "
                        f"Angstrom but the bands need {lo:.0f}-{hi:.0f} Angstrom",
                        file=source, column="band", value=(lo, hi))
    i0 = max(np.searchsorted(grid_wave, lo) - 1, 0)
    i1 = min(np.searchsorted(grid_wave, hi) + 1, grid_wave.size - 1)
    return grid_wave[i0:i1 + 1]


class PhotometryChannel:
    """Broad-band photometry with precomputed filter weight matrices.

    The model is evaluated on the photosphere grid's own pixels over the span of the
    filters; band fluxes are one matrix product for the whole batch.
    """

    kind = "photometry"

    def __init__(self, photometry, grid, model, r_v_prior, name="photometry"):
        self.name = name
        self.bands = list(photometry.bands)
        self.data = np.asarray(photometry.mag, float)
        self.err = np.asarray(photometry.total_err, float)
        wave = band_pixels(grid.wave, self.bands, source=photometry.source)
        n_coarse = int(np.ceil(PHOT_PIXEL_R * np.log(wave[-1] / wave[0]))) + 1
        if hasattr(grid, "log_flux") and wave.size > 1.5 * n_coarse:
            # Broad bands do not need the grid's full resolution: hat-weighted means of the
            # flux on lambda/dlambda = PHOT_PIXEL_R pixels change synthetic magnitudes by
            # < 1 mmag (tests/test_model.py; DEVELOPERS.md), with ~3x fewer pixels per call.
            self.wave = np.geomspace(wave[0], wave[-1], n_coarse)
            self.grid = grid.on_pixels(self.wave, average=True)
        else:
            self.wave = wave
            self.grid = grid.on_pixels(wave)
        self.bandset = photometry.bandset(self.wave)
        self.terms = Terms(self.wave, model, r_v_prior)

    @property
    def n_points(self):
        """Return the number of data points: the photometric bands."""
        return len(self.bands)

    def predict(self, p):
        """Model magnitudes (n, n_band)."""
        return self.bandset.mags(observed_flux(self.grid, self.terms, p))
