"""How well the model fits, per data set: a run can converge and still be a bad fit.

For every channel and a set of posterior draws:

* ``chi2_nu``: chi^2 of the data about the (calibrated) model with the *measurement*
  errors only (jitter included), divided by the number of points, at the median over
  draws. Near 1 when the model reproduces the data within their errors.
* ``rms_sigma``: the root-mean-square normalised residual (same draws, same errors).
* ``rms_frac``: for spectra, the rms residual as a fraction of the model flux -- the
  size of the grid's mismatch that a mismatch term has to absorb.
* ``ppc_p``: a posterior-predictive p-value of that chi^2: the fraction of draws whose
  replicated data (model + measurement noise) give a chi^2 at least as large as the
  data's (Gelman, Meng & Stern 1996, "Posterior predictive assessment of model fitness
  via realized discrepancies", Statistica Sinica 6, 733, from memory). Small values say
  the model, with the measurement errors alone, does not describe the data.

A data set with ``chi2_nu`` above :data:`BAD_CHI2_NU` gets a plain caution: the verdict
"converged" says the sampler is done, not that the model is right.
"""

import numpy as np

from .likelihood import pixel_variance

__all__ = ["BAD_CHI2_NU", "goodness_of_fit", "cautions"]

#: chi^2/nu above which a data set is called badly fitted (common practice, no source)
BAD_CHI2_NU = 2.0


def _calibrated(ch, p, model):
    from .observe.calibration import calibration_mean

    if ch.kind != "spectrum" or ch.basis is None:
        return model
    var = pixel_variance(ch, p, model, for_polynomial=True)
    sig = np.full(ch.basis.shape[0], ch.calibration_sigma)
    return model * (1.0 + calibration_mean(ch.data, var, model, ch.basis, sig))


#: draws x points evaluated at once (peak memory for long spectra: ~8 bytes each, x a few)
BLOCK_VALUES = 4_000_000


def _stats(ch, p, rng):
    """Per-draw chi^2, mean z^2, replicated chi^2 and rms fractional residual."""
    model = _calibrated(ch, p, ch.predict(p))
    err = ch.err[None, :]
    if ch.kind == "spectrum":
        err = p["jitter"][:, None] * err
    z2 = ((ch.data[None, :] - model) / err) ** 2
    rep = (rng.standard_normal(z2.shape) ** 2).sum(axis=1)
    frac = np.sqrt(np.mean(((ch.data[None, :] - model) / model) ** 2, axis=1))
    return z2.sum(axis=1), z2.mean(axis=1), rep, frac


def goodness_of_fit(prep, draws, rng):
    """``{"epoch.channel": {...}}`` goodness-of-fit numbers on ``draws`` (n, ndim)."""
    out = {}
    for label, chans in prep.channels.items():
        for ch in chans:
            n = ch.n_points
            step = max(1, BLOCK_VALUES // n)
            parts = [_stats(ch, prep.space.epoch_values(draws[i:i + step], label), rng)
                     for i in range(0, draws.shape[0], step)]
            chi2, mz2, rep, frac = (np.concatenate(a) for a in zip(*parts))
            entry = {
                "kind": ch.kind, "n_points": int(n),
                "chi2": float(np.median(chi2)), "chi2_nu": float(np.median(chi2) / n),
                "rms_sigma": float(np.sqrt(np.median(mz2))),
                "ppc_p": float(np.mean(rep >= chi2)),
            }
            if ch.kind == "spectrum":
                entry["rms_frac"] = float(np.median(frac))
                entry["mismatch"] = getattr(ch, "mismatch", "none")
            out[f"{label}.{ch.name}"] = entry
    return out


def cautions(gof):
    """Plain-language cautions for the badly fitted data sets."""
    out = []
    for key, g in gof.items():
        if g["chi2_nu"] > BAD_CHI2_NU:
            what = (f"residuals {g['rms_sigma']:.1f} sigma rms"
                    + (f" ({100 * g['rms_frac']:.1f} % of the flux)" if "rms_frac" in g else ""))
            absorbed = (" -- the mismatch term widens the intervals for it"
                        if g.get("mismatch", "none") != "none" else
                        " -- with no mismatch term the intervals are too narrow; "
                        "set mismatch = \"correlated\"" if g["kind"] == "spectrum" else "")
            out.append(f"bad fit of {key}: chi2/nu = {g['chi2_nu']:.1f} over {g['n_points']} "
                       f"points, {what}: the model does not describe these data within "
                       f"their errors{absorbed}")
    return out
