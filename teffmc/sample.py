"""emcee driver: start, convergence stop, checkpoint and resume, progress.

The run advances in chunks of ``check_every`` steps. After each chunk the new steps are
appended to the checkpoint (if any) and the stop rule is evaluated. The stop rule is a
pure function of the chain so far, and emcee's random state is saved with every chunk,
so a resumed run reproduces an uninterrupted one bit for bit.

The stop rule, burn-in and thinning are in :mod:`teffmc.sampling_stop`; the start in
:mod:`teffmc.sampling_start`; the checkpoint file in :mod:`teffmc.sampling_checkpoint`.
"""

import sys
import warnings
from dataclasses import dataclass

import emcee
import numpy as np

from teffmc.errors import ConfigError, ConvergenceWarning, TeffmcError
from teffmc.interrupt import DeferredInterrupt
from teffmc.sampling_checkpoint import memory_backend, resume_state, write_checkpoint
from teffmc.sampling_start import find_start, initial_ball
from teffmc.sampling_stop import (
    RHAT_GROUPS,
    RHAT_MAX,
    RHAT_WALKER_MAX,
    TAU_FACTOR,
    TAU_RTOL,
    autocorr_time,
    burn_thin,
    split_rhat,
    stop_rule,
)

__all__ = [
    "SampleResult",
    "run_sampler",
    "find_start",
    "initial_ball",
    "autocorr_time",
    "default_moves",
]


def default_moves():
    """Return the default move mixture: 80 % DEMove, 20 % StretchMove.

    Measured with ``python bench/bench_sample.py moves`` (48 walkers, 20000 steps, tau
    from steps 2000-20000, mean of 3 seeds with the per-seed range; emcee 3.1.6):

    ===================== ========== =============== ========== ===============
    move mixture          gauss5 acc gauss5 max tau  banana acc banana max tau
    ===================== ========== =============== ========== ===============
    Stretch               0.55       56 (54-59)      0.53       174 (167-181)
    DE                    0.29       17 (16-17)      0.17       110 (80-155)
    DE 0.8 + Snooker 0.2  0.23       22 (21-22)      0.14       109 (103-118)
    DE 0.8 + Stretch 0.2  0.34       19 (19-19)      0.24       110 (104-113)
    DE 0.7 + Stretch 0.3  0.37       21 (20-21)      0.28       95 (87-98)
    ===================== ========== =============== ========== ===============

    gauss5: 5-D Gaussian, all correlations 0.9, scales 1 to 1000; banana: twisted
    Gaussian x0 ~ N(0, 10^2), x1 + 0.03 (x0^2 - 100) ~ N(0, 1) (Haario, Saksman &
    Tamminen 1999, from memory). tau in steps. Any DE-dominated mixture beats the
    stretch move 3x on the correlated Gaussian and 1.6x on the banana. DE alone is
    best on the Gaussian but erratic from seed to seed on the banana; a fifth of
    stretch moves costs 15 % on the Gaussian and removes that spread. The snooker
    move is slower per step and no better here.

    Returns
    -------
    list of (emcee.moves.Move, float)
    """
    return [(emcee.moves.DEMove(), 0.8), (emcee.moves.StretchMove(), 0.2)]


@dataclass(frozen=True, eq=False)
class SampleResult:
    """The outcome of :func:`run_sampler`, after burn-in removal and thinning.

    Attributes
    ----------
    chain : numpy.ndarray, shape (n_draws, n_walkers, ndim)
    log_prob : numpy.ndarray, shape (n_draws, n_walkers)
    acceptance_fraction : numpy.ndarray, shape (n_walkers,)
        Over all ``n_steps`` steps.
    tau : numpy.ndarray, shape (ndim,)
        Integrated autocorrelation time per parameter [steps] at the last check.
    n_steps : int
        Steps run (before burn-in removal and thinning).
    burn, thin : int
        Steps discarded at the start, and the thinning stride [steps].
    converged : bool
    reason : str
        One line saying why the run stopped.
    names : tuple of str
    seed : int
    """

    chain: np.ndarray
    log_prob: np.ndarray
    acceptance_fraction: np.ndarray
    tau: np.ndarray
    n_steps: int
    burn: int
    thin: int
    converged: bool
    reason: str
    names: tuple
    seed: int

    @property
    def flat(self):
        """numpy.ndarray, shape (n_draws * n_walkers, ndim): all draws, walkers pooled."""
        return self.chain.reshape(-1, self.chain.shape[-1])


class _NoBar:
    """Stand-in for a tqdm bar when none is shown."""

    def update(self, n=1):
        """Do nothing."""

    def close(self):
        """Do nothing."""


def _progress_bar(enabled, total, initial):
    """Return a tqdm bar on stderr if enabled and stderr is a terminal, else a no-op."""
    if not (enabled and sys.stderr.isatty()):
        return _NoBar()
    try:
        from tqdm import tqdm
    except ImportError:  # tqdm is optional at run time: no bar, no error
        return _NoBar()
    return tqdm(total=total, initial=initial, unit="step", file=sys.stderr, dynamic_ncols=True)


def _check_args(names, n_walkers, max_steps, min_steps, check_every, tau_factor, tau_rtol):
    """Validate the scalar arguments of :func:`run_sampler`; return ndim."""
    names = tuple(names)
    if not names or len(set(names)) != len(names) or not all(isinstance(n, str) for n in names):
        raise ConfigError(f"should be distinct parameter names but got {list(names)}", key="names")
    ndim = len(names)
    ints = {"n_walkers": (n_walkers, 2 * ndim), "max_steps": (max_steps, 1),
            "min_steps": (min_steps, 0), "check_every": (check_every, 1)}
    for key, (value, low) in ints.items():
        if not isinstance(value, (int, np.integer)) or value < low:
            raise ConfigError(f"should be an integer >= {low} but got {value!r}", key=key)
    for key, value in (("tau_factor", tau_factor), ("tau_rtol", tau_rtol)):
        if not value > 0:
            raise ConfigError(f"should be > 0 but got {value!r}", key=key)
    return ndim


def _start_walkers(log_prob, x0, n_walkers, ndim, rng, ball_scale):
    """Walker positions (n_walkers, ndim) from a point or a ready ball."""
    x0 = np.asarray(x0, dtype=float)
    if x0.shape == (ndim,):
        scale = ball_scale * np.where(x0 != 0, np.abs(x0), 1.0)
        return initial_ball(x0, rng, n_walkers, log_prob, scale)
    if x0.shape != (n_walkers, ndim):
        raise ConfigError(f"should have shape ({ndim},) or ({n_walkers}, {ndim}) "
                          f"but got {x0.shape}", key="x0")
    return x0.copy()


def _fresh_state(log_prob, x0, n_walkers, ndim, seed, ball_scale):
    """Build the initial emcee state: walkers, log-probabilities, a seeded RandomState."""
    ball_seq, mcmc_seq = np.random.SeedSequence(seed).spawn(2)
    coords = _start_walkers(log_prob, x0, n_walkers, ndim, np.random.default_rng(ball_seq),
                            ball_scale)
    lp = np.asarray(log_prob(coords), dtype=float)
    if lp.shape != (n_walkers,) or not np.all(np.isfinite(lp)):
        raise TeffmcError(f"every starting walker needs a finite log-probability; got "
                          f"{int(np.sum(~np.isfinite(lp)))} non-finite of {lp.size}")
    random_state = np.random.RandomState(np.random.MT19937(mcmc_seq)).get_state()
    return emcee.State(coords, log_prob=lp, random_state=random_state)


def _rhat_check(chain, tau, n, names, rhat_max, text):
    """Confirm a passed tau rule with R-hat on the draws the run would keep.

    ``rhat_max`` applies to the walkers pooled into RHAT_GROUPS chains, RHAT_WALKER_MAX
    to each walker as a chain (why both: :func:`teffmc.sampling_stop.split_rhat`).
    """
    burn, thin = burn_thin(tau, n, True)
    kept = chain[burn + thin - 1::thin]  # emcee get_chain(discard, thin) indexing
    r, rw = split_rhat(kept, groups=RHAT_GROUPS), split_rhat(kept)
    k = int(np.nanargmax(r)) if np.any(np.isfinite(r)) else 0
    j = int(np.nanargmax(rw)) if np.any(np.isfinite(rw)) else 0
    text = (f"{text}; max R-hat {r[k]:.3f} ({names[k]}, limit {rhat_max}), walker-level "
            f"{rw[j]:.3f} ({names[j]}, limit {RHAT_WALKER_MAX})")
    ok = np.all(np.nan_to_num(r, nan=1.0) < rhat_max)
    return bool(ok and np.all(np.nan_to_num(rw, nan=1.0) < RHAT_WALKER_MAX)), text


def _initial_state(log_prob, x0, checkpoint, resume, names, n_walkers, seed, ball_scale,
                   say, coordinates="standard"):
    """(seed, emcee state, backend, resumed?) from the checkpoint or a fresh start."""
    saved = (resume_state(checkpoint, names, n_walkers, seed, coordinates)
             if resume and checkpoint else None)
    if saved is not None:
        state = emcee.State(saved["chain"][-1], log_prob=saved["log_prob"][-1],
                            random_state=saved["random_state"])
        backend = memory_backend(saved)
        say(f"resuming {checkpoint} at step {backend.iteration}")
        return saved["seed"], state, backend, True
    if resume and checkpoint:
        say(f"no steps in {checkpoint} to resume; starting afresh")
    if seed is None:
        seed = int(np.random.SeedSequence().generate_state(1, np.uint32)[0])
    state = _fresh_state(log_prob, x0, n_walkers, len(names), seed, ball_scale)
    return seed, state, emcee.backends.Backend(), False


def _check(sampler, tau_at, n, check_every, names, min_steps, tau_factor, tau_rtol, rhat_max):
    """Apply the stop rule at step n: return (tau, converged, text)."""
    prev = ((n - 1) // check_every) * check_every
    tau = tau_at(n)
    converged, text = stop_rule(n, tau, tau_at(prev), names=names, min_steps=min_steps,
                                tau_factor=tau_factor, tau_rtol=tau_rtol, prev_step=prev,
                                n_walkers=sampler.nwalkers)
    if converged and rhat_max is not None:
        converged, text = _rhat_check(sampler.get_chain(), tau, n, names, rhat_max, text)
    return tau, converged, text


def run_sampler(log_prob, x0, *, names, n_walkers=48, seed=None, max_steps=20000,
                min_steps=1000, check_every=500, tau_factor=TAU_FACTOR, tau_rtol=TAU_RTOL,
                moves=None, checkpoint=None, resume=False, progress=True, log=None, ball_scale=1e-3,
                rhat_max=RHAT_MAX):
    """Sample a posterior with emcee until the autocorrelation stop rule is met.

    Parameters
    ----------
    log_prob : callable
        Vectorised log-probability ``(n_walkers, ndim) -> (n_walkers,)``, ``-inf``
        outside the priors.
    x0 : array_like, shape (ndim,) or (n_walkers, ndim)
        A start point (e.g. from :func:`find_start`), around which a ball of relative
        size ``ball_scale`` is drawn, or the walkers' start positions. Ignored when
        resuming from a checkpoint that holds steps.
    names : sequence of str
        Parameter names, length ndim.
    n_walkers : int, optional
        Ensemble size, >= 2 ndim.
    seed : int, optional
        Seeds the start ball and emcee's generator; ``None`` draws one (it is returned in
        the result and stored in the checkpoint).
    max_steps, min_steps, check_every : int, optional
        Hard step limit, no convergence before ``min_steps``, stop-rule cadence [steps].
    tau_factor, tau_rtol : float, optional
        Stop when ``n > tau_factor * max(tau)`` and tau changed by less than ``tau_rtol``
        per 100 steps (relative), or 3 sd of its estimator noise if larger, over the last
        ``check_every`` steps (:mod:`teffmc.sampling_stop`).
    moves : emcee move or list of (move, weight), optional
        Default :func:`default_moves`.
    checkpoint : str or os.PathLike, optional
        HDF5 file (emcee layout), updated after every ``check_every`` steps.
    resume : bool, optional
        Continue from ``checkpoint`` if it holds steps (else start afresh); without it an
        existing checkpoint is overwritten.
    progress : bool, optional
        Show a tqdm bar, only if stderr is a terminal.
    log : callable, optional
        Called with one line of text at every check.
    ball_scale : float, optional
        Start-ball standard deviation relative to ``|x0|`` (absolute where x0 is 0).
    rhat_max : float or None, optional
        Also require the rank-normalised split R-hat of the burned and thinned draws
        (walkers pooled into RHAT_GROUPS chains; the statistic the summary reports)
        below this, and with each walker a chain below RHAT_WALKER_MAX, for every
        parameter before stopping; None switches both checks off.

    Returns
    -------
    SampleResult

    Raises
    ------
    ConfigError
        Bad arguments, or a checkpoint that does not match this run.
    TeffmcError
        Start walkers without finite log-probability.

    Warns
    -----
    ConvergenceWarning
        When ``max_steps`` is reached before the stop rule is met.
    """
    ndim = _check_args(names, n_walkers, max_steps, min_steps, check_every, tau_factor,
                       tau_rtol)
    names = tuple(names)
    if seed is not None and (not isinstance(seed, (int, np.integer)) or seed < 0):
        raise ConfigError(f"should be a non-negative integer but got {seed!r}", key="seed")
    say = log if log is not None else (lambda line: None)
    tag = getattr(log_prob, "coordinate_tag", "standard")
    seed, state, backend, resumed = _initial_state(log_prob, x0, checkpoint, resume, names,
                                                   n_walkers, seed, ball_scale, say, tag)
    interrupt = DeferredInterrupt(log_prob)  # Ctrl-C: stop between steps, no emcee traceback
    sampler = emcee.EnsembleSampler(n_walkers, ndim, interrupt, vectorize=True,
                                    moves=default_moves() if moves is None else moves,
                                    backend=backend)
    n = n_saved = backend.iteration if resumed else 0
    taus = {}

    def tau_at(m):  # tau from the first m steps; nan when there are too few
        if m < 2:
            return np.full(ndim, np.nan)
        if m not in taus:
            taus[m] = autocorr_time(sampler.get_chain()[:m])
        return taus[m]

    bar = _progress_bar(progress, max_steps, n)
    try:
        while True:
            if n > 0 and (n % check_every == 0 or n >= max_steps):
                tau, converged, text = _check(sampler, tau_at, n, check_every, names,
                                              min_steps, tau_factor, tau_rtol, rhat_max)
                say(f"{text}; acceptance {float(np.mean(backend.accepted / n)):.2f}")
                if converged or n >= max_steps:
                    break
            target = min(max_steps, (n // check_every + 1) * check_every)
            steps = sampler.sample(state, iterations=target - n)
            for state in steps:  # noqa: B007 - the last state carries on
                bar.update(1)
                interrupt.check()
            n = target
            if checkpoint:
                write_checkpoint(checkpoint, sampler.get_chain(), sampler.get_log_prob(),
                                 backend.accepted, state.random_state, n_saved=n_saved,
                                 seed=seed, names=names, coordinates=tag)
                n_saved = n
    finally:
        bar.close()
    burn, thin = burn_thin(tau, n, converged)
    if converged:
        reason = f"converged: {text}"
    else:
        reason = f"not converged at max_steps = {max_steps}: {text}"
        warnings.warn(reason, ConvergenceWarning, stacklevel=2)
    return SampleResult(
        chain=sampler.get_chain(discard=burn, thin=thin),
        log_prob=sampler.get_log_prob(discard=burn, thin=thin),
        acceptance_fraction=backend.accepted / n, tau=tau, n_steps=n, burn=burn, thin=thin,
        converged=converged, reason=reason, names=names, seed=int(seed),
    )
