"""Posterior density over the flat parameter vector, vectorised over walkers.

Spectra: Gaussian (or Student-t) in flux with variance ``(jitter * err)^2``; with a
calibration polynomial the likelihood is analytically marginalised over its
coefficients (see :func:`teffmc.observe.calibration.marginal_loglike`).
A spectrum's model-mismatch term (``mismatch = "white"`` or ``"correlated"``) adds a
covariance in units of the model flux (:mod:`teffmc.likelihood.mismatch`); with the
correlated term the pointwise terms are leave-one-pixel-out conditionals.
Photometry: Gaussian in magnitudes with the error and a systematic floor added in
quadrature.
"""

import numpy as np

from ..components import regions
from ..errors import OffGridError
from .mismatch import correlated_loglike_parts
from .mismatch_loo import correlated_loo_pointwise

__all__ = ["Posterior"]

LOG_2PI = np.log(2.0 * np.pi)


def _gauss(resid, var):
    return -0.5 * (resid**2 / var + np.log(var) + LOG_2PI)


def pixel_variance(ch, p, model, *, for_polynomial=False):
    """Per-pixel variance [flux^2] of a spectrum channel, shape (n_walkers, n_pix).

    Measurement errors times ``jitter``, the grid's interpolation error (when on) and the
    independent parts of the mismatch term: ``mismatch_amp`` for ``"white"``,
    ``mismatch_white`` for ``"correlated"``. The likelihood, the goodness of fit and the
    figures' calibration polynomial all take it from here. ``for_polynomial`` adds the
    correlated term's diagonal too (the polynomial's posterior mean of a figure is
    formed with independent pixels).
    """
    var = (p["jitter"][:, None] * ch.err[None, :]) ** 2
    if getattr(ch, "interp_frac", None) is not None:
        var = var + (ch.interp_frac[None, :] * model) ** 2
    kind = getattr(ch, "mismatch", "none")
    if kind == "white" or (kind == "correlated" and for_polynomial):
        var = var + (p["mismatch_amp"][:, None] * model) ** 2
    if kind == "correlated" and "mismatch_white" in p:
        var = var + (p["mismatch_white"][:, None] * model) ** 2
    return var


class Posterior:
    """log posterior = log prior + sum over epochs and channels of log likelihood.

    Parameters
    ----------
    space : teffmc.parameters.ParameterSpace
    channels : dict
        ``{epoch_label: [channel, ...]}`` (see :mod:`teffmc.model`).
    grid : photosphere used by the channels (to test grid bounds)
    """

    def __init__(self, space, channels, grid):
        self.space, self.channels, self.grid = space, channels, grid

    def _epoch_params(self, x, label):
        return self.space.epoch_values(x, label)

    def _inside_params(self, params):
        """Which walkers lie on the grid, given ``{label: parameter arrays}``."""
        ok = None
        for p in params.values():
            inside = self.grid.check_inside(p["teff"], p["logg"], p["mh"])
            reg = regions(p)
            for _, teff in reg:     # every surface region on the grid too
                inside &= self.grid.check_inside(teff, p["logg"], p["mh"])
            if len(reg) > 1:        # together at most the whole disc
                inside &= sum(c for c, _ in reg) <= 1.0
            ok = inside if ok is None else ok & inside
        return ok

    def channel_loglike(self, ch, p, pointwise=False):
        """Log-likelihood of one channel, (n,) or (n, n_points) when ``pointwise``."""
        model = ch.predict(p)
        if ch.kind == "photometry":
            terms = _gauss(ch.data[None, :] - model, ch.err[None, :] ** 2)
            return terms if pointwise else terms.sum(axis=1)
        if getattr(ch, "mismatch", "none") == "correlated" and not pointwise:
            # the variance of pixel_variance by its parts, formed inside the compiled filter
            frac = getattr(ch, "interp_frac", None)
            return correlated_loglike_parts(
                ch.data, ch.err**2, model, ch.velocity, p["mismatch_amp"],
                p["mismatch_scale"], p["jitter"] ** 2, 0.0 if frac is None else frac**2,
                p["mismatch_white"] ** 2 if "mismatch_white" in p else 0.0, ch.basis,
                ch.calibration_sigma, steps=getattr(ch, "kernel_steps", None))
        var = pixel_variance(ch, p, model)
        if getattr(ch, "mismatch", "none") == "correlated":
            return correlated_loo_pointwise(ch.data, var, model, ch.velocity,
                                            p["mismatch_amp"], p["mismatch_scale"], ch.basis,
                                            ch.calibration_sigma)
        if ch.likelihood == "student_t":
            from ..observe.calibration import student_t_loglike, student_t_pointwise

            if not pointwise:
                return student_t_loglike(ch.data, var, model, ch.student_nu)
            return student_t_pointwise(ch.data, var, model, ch.student_nu)
        if ch.basis is not None:
            from ..observe.calibration import calibration_mean, marginal_loglike_fast

            if not pointwise:
                return marginal_loglike_fast(ch.data, var, model, ch.basis,
                                             np.full(ch.basis.shape[0], ch.calibration_sigma))
            # Pointwise terms condition on the posterior-mean polynomial of each draw
            # (the marginal likelihood does not split into independent pixels).
            poly = calibration_mean(ch.data, var, model, ch.basis,
                                    np.full(ch.basis.shape[0], ch.calibration_sigma))
            model = model * (1.0 + poly)
        terms = _gauss(ch.data[None, :] - model, var)
        return terms if pointwise else terms.sum(axis=1)

    def __call__(self, x):
        """Return the log posterior density (up to a constant) of walkers ``x`` (n, n_dim).

        Shape (n,); -inf where the prior is zero, a walker's surface leaves the grid, or
        the likelihood is not finite.
        """
        x = np.atleast_2d(np.asarray(x, float))
        lp = self.space.log_prior(x)
        good = np.isfinite(lp)
        # the per-epoch parameter arrays are built once and used for the grid test and
        # the likelihood alike
        params = {lab: self._epoch_params(x[good], lab) for lab in self.channels}
        inside = self._inside_params(params)
        good[good] = inside
        lp[~good] = -np.inf
        if not good.any():
            return lp
        total = lp[good]
        for label, chans in self.channels.items():
            p = {k: v[inside] for k, v in params[label].items()}
            for ch in chans:
                total = total + self.channel_loglike(ch, p)
        total[~np.isfinite(total)] = -np.inf
        lp[good] = total
        return lp

    def pointwise(self, x):
        """``{"epoch.channel": (n, n_points)}`` pointwise log-likelihood terms.

        Without a calibration polynomial the terms of all channels add up to the
        log-likelihood that :meth:`__call__` adds to the log prior. With one, the
        marginal likelihood does not split into pixels, and a spectrum's terms condition
        on each draw's posterior-mean polynomial instead (used only for PSIS-LOO).
        """
        x = np.atleast_2d(np.asarray(x, float))
        for label in self.channels:   # name the epoch whose parameters leave the grid
            p = self._epoch_params(x, label)
            inside = self._inside_params({label: p})
            if not inside.all():
                k = int(np.argmin(inside))
                raise OffGridError({a: float(p[a][k]) for a in ("teff", "logg", "mh")},
                                   self.grid.bounds, epoch=label if len(self.channels) > 1
                                   else None)
        out = {}
        for label, chans in self.channels.items():
            p = self._epoch_params(x, label)
            for ch in chans:
                out[f"{label}.{ch.name}"] = self.channel_loglike(ch, p, pointwise=True)
        return out
