"""The stop rule: autocorrelation time, convergence test, burn-in and thinning.

Stop rule (Foreman-Mackey et al. 2013, PASP 125, 306, and the emcee "Autocorrelation
analysis & convergence" tutorial; the factor 50 is common practice, no source): at step
``n`` estimate the integrated autocorrelation time ``tau`` of every parameter
(:func:`autocorr_time`: walker-averaged autocorrelation about the ensemble mean, Sokal's
automatic window with c = 5); converged when ``n >= min_steps``, ``n > tau_factor *
max(tau)`` and every ``|tau(n) - tau(n')| / tau(n)`` (n' the previous check) is below the
larger of ``tau_rtol * sqrt((n - n') / 100)`` and three standard deviations of that
change's estimator noise (:func:`tau_change_sd`). The emcee tutorial checks every 100
steps with a 1 % tolerance; scaled by ``sqrt(check_every / 100)`` for sparser checks.
The noise floor is there because a 1 % tolerance is far below the noise of a 48-walker
tau estimate at 50 tau (sd of the change between checks 500 steps apart ~4 % at tau 57),
so the old rule waited for lucky fluctuations: measured on stationary AR(1) walkers
(48 walkers, 10 parameters, tau 57) it stopped at a median 120 tau instead of 50. tau is
computed from the whole chain so far, so the rule is a pure function of the chain
(which makes a resumed run repeat an uninterrupted one exactly).

After the stop, burn-in = ceil(3 max tau) steps and thin = floor(min tau / 2). The emcee
tutorial uses 2 max tau and min tau / 2; 3 because our walkers start in a tight ball
whose expansion takes a few tau.

Once the tau rule passes, R-hat confirms it on the draws the run would keep: below
RHAT_MAX = 1.01 with the walkers pooled into RHAT_GROUPS = 4 chains, and below
RHAT_WALKER_MAX = 1.1 with each walker a chain (why both: :func:`split_rhat`).
"""

import math

import numpy as np

from teffmc.errors import TeffmcError

__all__ = ["autocorr_time", "tau_change_sd", "stop_rule", "burn_thin", "split_rhat",
           "group_walkers"]

TAU_FACTOR = 50.0  # chain length required, in units of max tau (common practice, no source)
TAU_RTOL = 0.01    # relative change of tau allowed per 100 steps (emcee tutorial)
TAU_NOISE_K = 3.0  # ... or this many sd of the change's estimator noise, if larger
TAU_WINDOW_C = 5.0  # Sokal's automatic window: the largest lag M with M < c tau(M)
RHAT_MAX = 1.01    # rank-normalised split R-hat limit (Vehtari et al. 2021, from memory)
RHAT_GROUPS = 4    # walkers pooled into this many chains for that R-hat (see split_rhat)
RHAT_WALKER_MAX = 1.1  # R-hat limit with each walker a chain (Gelman et al. 2013, BDA3 §11.4)
BURN_TAUS = 3.0  # burn-in in units of max tau (see module docstring)
THIN_TAUS = 0.5  # thinning in units of min tau


def autocorr_time(chain):
    """Estimate the integrated autocorrelation time of each parameter of an ensemble chain.

    The autocorrelation function is averaged over the walkers, each walker's deviations
    taken from the ensemble mean of the whole chain (not from the walker's own mean), and
    summed up to Sokal's automatic window (c = 5; Sokal 1997, "Monte Carlo methods in
    statistical mechanics", from memory; the window rule of emcee's
    ``autocorr.integrated_time``). Why the ensemble mean: subtracting each walker's own
    mean biases every lag of the autocorrelation by about -tau / n, so tau by about
    -2 c tau^2 / n: measured on AR(1) walkers with tau 57 (48 walkers), emcee's
    walker-mean estimator gives 46-49 at 3000 steps (52 tau) and 52-54 at 8000, the
    ensemble-mean one 52-58 and 55-58. Walkers that have not mixed (different means)
    raise tau instead of hiding in their own means.

    Parameters
    ----------
    chain : array_like, shape (n_steps, n_walkers, ndim)
        The chain, as ``emcee.EnsembleSampler.get_chain()`` returns it.

    Returns
    -------
    numpy.ndarray, shape (ndim,)
        tau [steps]; ``nan`` for a parameter that never moves.

    Raises
    ------
    TeffmcError
        If ``chain`` is not 3-D with at least 2 steps.
    """
    chain = np.asarray(chain, dtype=float)
    if chain.ndim != 3 or chain.shape[0] < 2:
        raise TeffmcError(f"chain should have shape (n_steps >= 2, n_walkers, ndim) "
                          f"but got {chain.shape}")
    n = chain.shape[0]
    nfft = 1 << int(math.ceil(math.log2(2 * n)))     # zero padding: no circular wrap
    out = np.full(chain.shape[2], np.nan)
    for k in range(chain.shape[2]):
        y = chain[:, :, k] - np.mean(chain[:, :, k])
        f = np.fft.rfft(y, n=nfft, axis=0)
        acf = np.fft.irfft(f.real**2 + f.imag**2, n=nfft, axis=0)[:n].mean(axis=1)
        if not acf[0] > 0:
            continue                                   # a frozen parameter
        taus = 2.0 * np.cumsum(acf / acf[0]) - 1.0
        short = np.arange(n) < TAU_WINDOW_C * taus
        out[k] = taus[np.argmin(short) if not short.all() else n - 1]
    return out


def tau_change_sd(tau, n, prev_step, n_walkers):
    """Return the sd of the relative change of tau's estimate between two checks.

    The windowed estimator has variance 2 (2M + 1) tau^2 / N with window M = c tau over
    N = n x n_walkers draws (Madras & Sokal 1988, J. Stat. Phys. 50, 109; Sokal 1997,
    both from memory). The estimate at ``n`` shares the first ``prev_step`` steps with
    the one at ``prev_step``, so their difference, like that of running means, has the
    variance of the earlier one minus that of the later:
    2 (2M + 1) / n_walkers x (1 / prev_step - 1 / n), relative to tau^2.

    Parameters
    ----------
    tau : numpy.ndarray, shape (ndim,)
        tau [steps] at step ``n``.
    n, prev_step : int
        The two checks' steps, ``0 < prev_step < n``.
    n_walkers : int

    Returns
    -------
    numpy.ndarray, shape (ndim,)
        Relative standard deviation (0.04 = 4 %).
    """
    m = TAU_WINDOW_C * np.asarray(tau, float)
    return np.sqrt(2.0 * (2.0 * m + 1.0) / n_walkers * (1.0 / prev_step - 1.0 / n))


def stop_rule(n, tau, tau_prev, *, names, min_steps, tau_factor, tau_rtol, prev_step,
              n_walkers=None):
    """Decide whether the chain has converged at step ``n``.

    Parameters
    ----------
    n : int
        Steps so far.
    tau, tau_prev : numpy.ndarray, shape (ndim,)
        tau [steps] from the first ``n`` and the first ``prev_step`` steps.
    names : sequence of str
        Parameter names, for the message.
    min_steps : int
        No convergence before this many steps.
    tau_factor : float
        Required chain length in units of max tau.
    tau_rtol : float
        Relative change of tau accepted per 100 steps (scaled by the square root of the
        steps between the two estimates).
    prev_step : int
        Step of ``tau_prev``; 0 means no earlier estimate (never stable).
    n_walkers : int, optional
        With it, the accepted change is at least :data:`TAU_NOISE_K` standard deviations
        of the estimator's noise (:func:`tau_change_sd`); without, ``tau_rtol`` alone.

    Returns
    -------
    converged : bool
    text : str
        One line with the numbers behind the decision.
    """
    if not np.all(np.isfinite(tau)):
        stuck = [nm for nm, t in zip(names, tau, strict=True) if not np.isfinite(t)]
        return False, f"{n} steps: parameter(s) {', '.join(stuck)} never moved"
    k = int(np.argmax(tau))
    long_enough = n > tau_factor * tau[k]
    limit = np.full(tau.shape, tau_rtol * math.sqrt(max(n - prev_step, 1) / 100.0))
    if n_walkers is not None and 0 < prev_step < n:
        limit = np.maximum(limit, TAU_NOISE_K * tau_change_sd(tau, n, prev_step, n_walkers))
    with np.errstate(invalid="ignore", divide="ignore"):  # tau 0 from a 2-step chain
        change = np.abs(tau - tau_prev) / tau if prev_step > 0 else np.full(tau.shape, np.inf)
        ratio = np.where(np.isnan(change), np.inf, change / limit)
    j = int(np.argmax(ratio))
    dtxt = f"{change[j]:.1%} for {names[j]}" if np.isfinite(ratio[j]) else "unknown"
    text = (f"{n} steps, {tau_factor:g} x max tau = {tau_factor * tau[k]:.0f} "
            f"(tau {tau[k]:.1f} for {names[k]}), tau changed by {dtxt} "
            f"since step {prev_step} (limit {limit[j]:.1%})")
    if n < min_steps:
        return False, f"{text}; fewer than min_steps = {min_steps}"
    return bool(long_enough and ratio[j] < 1.0), text


def burn_thin(tau, n, converged):
    """Choose burn-in and thinning from tau.

    Parameters
    ----------
    tau : numpy.ndarray, shape (ndim,)
        Integrated autocorrelation times [steps].
    n : int
        Steps run.
    converged : bool
        If False, burn-in is capped at ``n // 2`` and thinning so that at least about
        ten draws per walker remain.

    Returns
    -------
    burn, thin : int
        Steps to discard and stride [steps].
    """
    if not np.all(np.isfinite(tau)):
        return n // 2, 1
    burn = math.ceil(BURN_TAUS * float(np.max(tau)))
    thin = max(1, math.floor(THIN_TAUS * float(np.min(tau))))
    if not converged:
        burn = min(burn, n // 2)
        thin = min(thin, max(1, (n - burn) // 10))
    return burn, thin


def _basic_split_rhat(x):
    """Split R-hat of x (n_draws, n_chains) (Gelman et al. 2013, BDA3 eq. 11.4)."""
    n = x.shape[0] // 2
    halves = np.concatenate([x[:n], x[-n:]], axis=1)
    w = np.mean(np.var(halves, axis=0, ddof=1))
    b = n * np.var(np.mean(halves, axis=0), ddof=1)
    if w <= 0:
        return np.nan
    return float(np.sqrt(((n - 1) / n * w + b / n) / w))


def _rank_normal(x):
    from scipy.special import ndtri
    from scipy.stats import rankdata

    r = rankdata(x, method="average").reshape(x.shape)
    return ndtri((r - 0.375) / (x.size + 0.25))


def group_walkers(x, groups=RHAT_GROUPS):
    """Pool the walkers of one parameter into ``groups`` chains.

    Parameters
    ----------
    x : numpy.ndarray, shape (n_draws, n_walkers)
    groups : int

    Returns
    -------
    numpy.ndarray, shape (n_draws * k, groups) or (n_draws, n_walkers)
        Group ``g`` holds walkers ``g k .. (g + 1) k - 1`` (``k = n_walkers // groups``;
        the last ``n_walkers % groups`` walkers are left out), their draws of one step one
        after another, so the first half of a group's chain is the early half of the run.
        ``x`` itself when there are fewer than two walkers per group.
    """
    n, w = x.shape
    if w < 2 * groups:
        return x
    k = w // groups
    return x[:, :k * groups].reshape(n, groups, k).transpose(0, 2, 1).reshape(n * k, groups)


def split_rhat(chain, groups=None):
    """Rank-normalised split R-hat per parameter, the larger of bulk and tail versions.

    Vehtari, Gelman, Simpson, Carpenter & Bürkner 2021, Bayesian Analysis 16, 667
    (the estimator ArviZ reports). With ``groups=None`` every walker is a chain; with
    ``groups=g`` the walkers are pooled into ``g`` chains (:func:`group_walkers`).

    Why groups: the 1.01 limit of Vehtari et al. is meant for a few (>= 4) chains of
    many effective draws each. An ensemble walker holds only ~(n - burn) / tau effective
    draws, and the split R-hat of perfectly mixed walkers sits near
    1 + 1 / (2 ESS per half-walker): measured on independent AR(1) walkers (48 walkers,
    tau 100), 1.020-1.025 at 50 tau and 1.010 only at ~100 tau, so a walker-level 1.01
    doubles every run whatever its mixing (DEVELOPERS.md, the R-hat gate). Pooled into 4
    groups of 12 the same walkers give 1.003 at 50 tau, and a group that disagrees with
    the others is still seen. Walkers stranded in separate modes but spread evenly over
    the groups are caught by the walker-level R-hat with the classic 1.1 limit
    (:data:`RHAT_WALKER_MAX`), far above its noise floor.

    Parameters
    ----------
    chain : numpy.ndarray, shape (n_draws, n_walkers, ndim)
    groups : int or None
        Pool the walkers into this many chains; None (or fewer than 2 walkers per
        group) for one chain per walker.

    Returns
    -------
    numpy.ndarray, shape (ndim,)
    """
    out = np.empty(chain.shape[2])
    for i in range(chain.shape[2]):
        x = chain[:, :, i]
        if x.shape[0] < 4 or np.ptp(x) == 0:
            out[i] = np.nan
            continue
        if groups is not None:
            x = group_walkers(x, groups)
        bulk = _basic_split_rhat(_rank_normal(x))
        tail = _basic_split_rhat(_rank_normal(np.abs(x - np.median(x))))
        out[i] = max(bulk, tail)
    return out
