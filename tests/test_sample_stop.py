"""Autocorrelation time, the stop rule, burn-in and thinning (teffmc.sampling_stop).

The AR(1) check follows emcee's own tests (emcee/tests/unit/test_autocorr.py): for
x_t = phi x_(t-1) + e_t the integrated autocorrelation time is (1 + phi) / (1 - phi)
(Sokal 1997, "Monte Carlo methods in statistical mechanics", from memory).
"""

import numpy as np
import pytest
from scipy.signal import lfilter

from teffmc.errors import TeffmcError
from teffmc.sampling_stop import autocorr_time, burn_thin, stop_rule


def ar1_chain(rng, phi, n_steps, n_walkers):
    """AR(1) chains, shape (n_steps, n_walkers, len(phi)), started in the stationary law."""
    out = np.empty((n_steps, n_walkers, len(phi)))
    for k, p in enumerate(phi):
        e = rng.standard_normal((n_steps, n_walkers))
        x0 = rng.standard_normal(n_walkers) / np.sqrt(1 - p**2)
        out[:, :, k] = lfilter([1.0], [1.0, -p], e, axis=0, zi=p * x0[None, :])[0]
    return out


@pytest.fixture
def rng():
    return np.random.default_rng(42)


def test_autocorr_time_of_ar1_chains(rng):
    phi = np.array([0.0, 0.5, 0.9, 0.95])
    tau_true = (1 + phi) / (1 - phi)  # 1, 3, 19, 39 steps
    tau = autocorr_time(ar1_chain(rng, phi, 20000, 32))
    # relative error of the windowed estimator ~ sqrt(2 (2M + 1) / N) with M ~ 5 tau,
    # N = 640000: <= 3.5 % for tau = 39 (Sokal 1997, from memory); allow 3 sigma
    assert np.allclose(tau, tau_true, rtol=0.1), tau


def test_autocorr_time_of_a_frozen_parameter_is_nan_without_warning(rng):
    chain = ar1_chain(rng, [0.5], 500, 8)
    chain = np.concatenate([chain, np.ones_like(chain)], axis=2)
    tau = autocorr_time(chain)
    assert np.isfinite(tau[0]) and np.isnan(tau[1])


def test_autocorr_time_rejects_a_flat_array(rng):
    with pytest.raises(TeffmcError, match="should have shape"):
        autocorr_time(rng.standard_normal((100, 3)))


RULE = {"names": ["teff", "a_v"], "min_steps": 1000, "tau_factor": 50.0, "tau_rtol": 0.01}


@pytest.mark.parametrize(
    ("n", "tau", "tau_prev", "prev_step", "converged"),
    [
        (6000, [100.0, 50.0], [100.5, 50.2], 5500, True),  # long and stable
        (4000, [100.0, 50.0], [100.5, 50.2], 3500, False),  # shorter than 50 tau
        (6000, [100.0, 50.0], [97.0, 50.0], 5500, False),  # moved 3 % in 500 (limit 2.2 %)
        (6000, [100.0, 50.0], [98.0, 50.0], 5500, True),  # moved 2 % in 500 steps
        (6000, [100.0, 50.0], [98.0, 50.0], 5900, False),  # moved 2 % in 100 (limit 1 %)
        (6000, [100.0, 50.0], [np.nan, np.nan], 0, False),  # no earlier estimate
        (900, [10.0, 5.0], [10.0, 5.0], 800, False),  # before min_steps
        (6000, [100.0, np.nan], [100.0, 50.0], 5500, False),  # a frozen parameter
        (6000, [0.0, 0.0], [0.0, 0.0], 5500, False),  # degenerate 2-step estimate, no 0/0 warning
    ],
)
def test_stop_rule_cases(n, tau, tau_prev, prev_step, converged):
    ok, text = stop_rule(n, np.array(tau), np.array(tau_prev), prev_step=prev_step, **RULE)
    assert ok is converged
    assert "\n" not in text and str(n) in text


def test_stop_rule_names_the_slowest_parameter():
    _, text = stop_rule(6000, np.array([10.0, 80.0]), np.array([10.0, 80.0]),
                        prev_step=5500, **RULE)
    assert "tau 80.0 for a_v" in text and "4000" in text


def test_burn_and_thin_from_tau():
    assert burn_thin(np.array([20.0, 41.2]), 5000, True) == (124, 10)
    assert burn_thin(np.array([1.5, 1.2]), 5000, True) == (5, 1)


def test_burn_and_thin_keep_draws_when_not_converged():
    burn, thin = burn_thin(np.array([400.0, 300.0]), 1000, False)
    assert burn == 500 and (1000 - burn) // thin >= 10
    assert burn_thin(np.array([np.nan, 3.0]), 1000, False) == (500, 1)


def test_split_rhat_detects_walkers_in_different_places():
    # Vehtari et al. 2021: R-hat ~ 1 for well-mixed chains, >> 1 when chains disagree
    from teffmc.sampling_stop import split_rhat

    rng = np.random.default_rng(0)
    good = rng.normal(size=(400, 16, 1))
    bad = good.copy()
    bad[:, :8, 0] += 3.0
    assert split_rhat(good)[0] < 1.01
    assert split_rhat(bad)[0] > 1.5


def test_split_rhat_agrees_with_arviz():
    # the same estimator as ArviZ's default (rank-normalised split R-hat)
    import arviz as az

    rng = np.random.default_rng(1)
    x = np.cumsum(rng.normal(size=(300, 8, 1)), axis=0) * 0.05 + rng.normal(size=(300, 8, 1))
    from teffmc.sampling_stop import split_rhat

    ref = float(az.rhat(np.swapaxes(x[:, :, 0], 0, 1)))
    assert split_rhat(x)[0] == pytest.approx(ref, rel=1e-6)


def _ar1_walkers(rng, n, walkers, ndim, tau):
    """Independent AR(1) walkers with integrated autocorrelation time ``tau``
    ((1 + rho) / (1 - rho) for AR(1), Sokal 1997, from memory)."""
    rho = (tau - 1) / (tau + 1)
    x = np.empty((n, walkers, ndim))
    x[0] = rng.normal(size=(walkers, ndim))
    e = rng.normal(size=(n, walkers, ndim)) * np.sqrt(1 - rho**2)
    for i in range(1, n):
        x[i] = rho * x[i - 1] + e[i]
    return x


def test_group_walkers_keeps_step_order():
    from teffmc.sampling_stop import group_walkers

    x = np.arange(6 * 8).reshape(6, 8)          # x[step, walker] = 8 step + walker
    g = group_walkers(x, 4)
    assert g.shape == (12, 4)
    # group 1 = walkers 2, 3; its draws step by step, so its first half is the early steps
    assert g[:, 1].tolist() == [2, 3, 10, 11, 18, 19, 26, 27, 34, 35, 42, 43]
    assert group_walkers(x[:, :7], 4).shape == (6, 7)     # < 2 walkers a group: unpooled


def test_grouped_rhat_agrees_with_arviz_on_the_pooled_chains():
    # the same estimator as ArviZ's rank-normalised split R-hat, on the pooled layout
    import arviz as az

    from teffmc.sampling_stop import group_walkers, split_rhat

    rng = np.random.default_rng(3)
    x = _ar1_walkers(rng, 400, 16, 1, 5.0) + np.linspace(0, 0.3, 400)[:, None, None]
    ref = float(az.rhat(group_walkers(x[:, :, 0], 4).T))
    assert split_rhat(x, groups=4)[0] == pytest.approx(ref, rel=1e-6)


def test_grouped_rhat_passes_well_mixed_walkers_at_fifty_tau():
    """Independent, perfectly mixed AR(1) walkers run for 50 tau (the tau rule's length):
    the walker-level R-hat sits above 1.01 on noise alone, the grouped one below it."""
    from teffmc.sampling_stop import RHAT_MAX, split_rhat

    rng = np.random.default_rng(4)
    x = _ar1_walkers(rng, 1000, 48, 6, 20.0)[::10]     # 50 tau, thinned by tau / 2
    assert np.all(split_rhat(x, groups=4) < RHAT_MAX)
    assert np.max(split_rhat(x)) > RHAT_MAX


def test_grouped_rhat_sees_one_group_apart():
    from teffmc.sampling_stop import RHAT_MAX, split_rhat

    rng = np.random.default_rng(5)
    x = _ar1_walkers(rng, 1000, 48, 1, 20.0)[::10]
    x[:, :12, 0] += 0.5                                 # a quarter of the walkers elsewhere
    assert split_rhat(x, groups=4)[0] > RHAT_MAX


def test_stop_check_refuses_walkers_stranded_in_two_modes():
    """Walkers split between two modes, evenly over the groups: the grouped R-hat can miss
    it, the walker-level check (limit 1.1) does not."""
    from teffmc.sample import _rhat_check
    from teffmc.sampling_stop import split_rhat

    rng = np.random.default_rng(6)
    x = _ar1_walkers(rng, 2000, 48, 1, 20.0)
    x[:, 1::2, 0] += 4.0                                # every other walker in a second mode
    assert split_rhat(x[::10], groups=4)[0] < 1.1
    ok, text = _rhat_check(x, np.array([20.0]), 2000, ["teff"], 1.01, "tau ok")
    assert not ok and "walker-level" in text
    good = _ar1_walkers(rng, 2000, 48, 1, 20.0)
    ok, text = _rhat_check(good, np.array([20.0]), 2000, ["teff"], 1.01, "tau ok")
    assert ok, text


def test_ensemble_mean_autocorr_time_is_unbiased_at_50_tau(rng):
    """At 50 tau the walker-averaged estimator about the ensemble mean is within its noise
    of the AR(1) truth, while emcee's (each walker about its own mean) is biased low by
    ~2 c tau / n ~ 20 % (the reason for the ensemble mean, see autocorr_time)."""
    import emcee

    phi = np.full(8, 0.95)                       # tau = 39 steps
    chain = ar1_chain(rng, phi, 2000, 48)
    ours = autocorr_time(chain) / 39.0
    theirs = emcee.autocorr.integrated_time(chain, c=5, tol=0) / 39.0
    # 8 parameters, each with relative sd sqrt(2 (2M + 1) / N) ~ 9 %: mean sd ~ 3 %
    assert abs(ours.mean() - 1.0) < 0.08, ours
    assert theirs.mean() < 0.9, theirs


def test_tau_change_sd_matches_the_spread_of_changes(rng):
    """The stated noise of the change between two checks agrees with the spread of that
    change over AR(1) replicates (Madras & Sokal's variance, see tau_change_sd)."""
    from teffmc.sampling_stop import tau_change_sd

    changes, predicted = [], []
    for _ in range(12):
        chain = ar1_chain(rng, np.full(6, 0.9), 1000, 48)       # tau 19, n ~ 53 tau
        t1, t0 = autocorr_time(chain), autocorr_time(chain[:800])
        changes.append((t1 - t0) / t1)
        predicted.append(tau_change_sd(t1, 1000, 800, 48))
    spread = np.std(np.concatenate(changes))
    assert 0.6 < spread / np.mean(predicted) < 1.5, (spread, np.mean(predicted))


def test_stationary_walkers_stop_soon_after_50_tau(rng):
    """Ten parameters of stationary AR(1) walkers (tau 19, 48 walkers, checks every 100
    steps): with the noise floor the rule stops within ~65 tau; the plain emcee-tutorial
    tolerance (no n_walkers) waits for lucky noise far longer."""
    tau_true = 19.0
    chain = ar1_chain(rng, np.full(10, 0.9), int(150 * tau_true), 48)
    rule = {"names": [f"p{i}" for i in range(10)], "min_steps": 100, "tau_factor": 50.0,
            "tau_rtol": 0.01}

    def first_stop(**kw):
        prev = autocorr_time(chain[:800])
        for n in range(900, chain.shape[0] + 1, 100):
            tau = autocorr_time(chain[:n])
            if stop_rule(n, tau, prev, prev_step=n - 100, **rule, **kw)[0]:
                return n / tau_true
            prev = tau
        return np.inf

    assert first_stop(n_walkers=48) < 65.0
    assert first_stop() > first_stop(n_walkers=48)
