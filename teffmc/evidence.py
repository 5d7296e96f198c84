"""Bayesian evidence by nested sampling (dynesty, a general-purpose library).

The evidence Z = ∫ L(x) π(x) dx is the second, independent estimate that
``teffmc compare`` puts beside PSIS-LOO. dynesty (Speagle 2020, MNRAS 493, 3132)
implements Skilling's (2004) nested sampling; its ``logzerr`` is the statistical
error of ln Z from the prior-volume shrinkage. The prior transform is each prior's
inverse cumulative distribution, so the priors are exactly those of the fit.
"""

import numpy as np

from .interrupt import DeferredInterrupt

__all__ = ["log_evidence"]


def log_evidence(log_post, space, *, seed, nlive=200, dlogz=0.1):
    """Compute ln Z and its error for a prepared posterior by nested sampling.

    Parameters
    ----------
    log_post : callable
        Vectorised log posterior (n, ndim) -> (n,).
    space : teffmc.parameters.ParameterSpace
        Gives the priors (their ppf) and log prior density.
    seed : int
    nlive : int
        Live points.
    dlogz : float
        Stopping tolerance on the remaining evidence.

    Returns
    -------
    (float, float, int)
        ln Z, its 1-sigma error, and the number of likelihood calls.
    """
    import dynesty

    def loglike(x):
        x = x[None, :]
        lp = space.log_prior(x)
        v = log_post(x) - lp
        return float(v[0]) if np.isfinite(v[0]) else -1e300

    def transform(u):
        return np.array([pr.ppf(ui) for pr, ui in zip(space.priors, u)])

    # Ctrl-C: held back to the end of the iteration (dynesty would print a traceback);
    # the "progress" callback, called once an iteration, raises it
    loglike, transform = DeferredInterrupt(loglike), DeferredInterrupt(transform)

    def between_iterations(*args, **kwargs):
        loglike.check()
        transform.check()

    sampler = dynesty.NestedSampler(loglike, transform, space.ndim, nlive=nlive,
                                    rstate=np.random.default_rng(seed), sample="rwalk")
    sampler.run_nested(dlogz=dlogz, print_progress=True, print_func=between_iterations)
    res = sampler.results
    return float(res.logz[-1]), float(res.logzerr[-1]), int(np.sum(res.ncall))
