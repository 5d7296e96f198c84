"""run_sampler: non-convergence, argument checks, start handling, log and progress."""

import io
import sys

import numpy as np
import pytest

from teffmc.errors import ConfigError, ConvergenceWarning, TeffmcError
from teffmc.sample import SampleResult, run_sampler
from test_sample_problems import gaussian_2d

FAST = {"n_walkers": 16, "check_every": 100, "min_steps": 0, "progress": False, "seed": 3}


@pytest.fixture(scope="module")
def target():
    return gaussian_2d()


def test_short_run_is_flagged_not_converged(target):
    with pytest.warns(ConvergenceWarning, match="not converged at max_steps = 200") as rec:
        res = run_sampler(target.log_prob, target.mean, names=target.names, max_steps=200,
                          **FAST)
    assert len(rec) == 1
    assert res.converged is False and res.n_steps == 200
    assert res.reason.startswith("not converged") and "\n" not in res.reason
    assert "tau changed by" in res.reason and "50 x max tau" in res.reason
    # still usable draws: burn capped at half the chain
    assert res.burn <= 100 and res.chain.shape[0] >= 10


def test_max_steps_not_a_multiple_of_check_every(target):
    with pytest.warns(ConvergenceWarning):
        res = run_sampler(target.log_prob, target.mean, names=target.names, max_steps=250,
                          **FAST)
    assert res.n_steps == 250 and "since step 200" in res.reason


def test_min_steps_holds_back_convergence(target):
    kw = {**FAST, "min_steps": 2500}
    res = run_sampler(target.log_prob, target.mean, names=target.names, **kw)
    assert res.converged and res.n_steps >= 2500


def test_a_looser_rule_stops_sooner(target):
    strict = run_sampler(target.log_prob, target.mean, names=target.names, **FAST)
    loose = run_sampler(target.log_prob, target.mean, names=target.names, tau_factor=20,
                        tau_rtol=0.2, **FAST)
    assert loose.converged and loose.n_steps < strict.n_steps


def test_log_gets_one_line_per_check(target):
    lines = []
    res = run_sampler(target.log_prob, target.mean, names=target.names, log=lines.append,
                      **FAST)
    assert len(lines) == res.n_steps // 100
    assert all("\n" not in ln and "acceptance" in ln for ln in lines)
    assert lines[0].startswith("100 steps")


def test_progress_bar_stays_quiet_off_a_terminal(target, capsys):
    run_sampler(target.log_prob, target.mean, names=target.names, max_steps=300,
                **{**FAST, "progress": True, "tau_factor": 1.0, "tau_rtol": 1.0, "rhat_max": None})
    out, err = capsys.readouterr()
    assert out == "" and err == ""


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_bar_on_a_terminal(target, monkeypatch):
    monkeypatch.setattr(sys, "stderr", _Terminal())
    run_sampler(target.log_prob, target.mean, names=target.names, max_steps=300,
                **{**FAST, "progress": True, "tau_factor": 1.0, "tau_rtol": 1.0, "rhat_max": None})
    assert "200/300" in sys.stderr.getvalue()


def test_no_progress_bar_on_a_terminal_when_disabled(target, monkeypatch):
    monkeypatch.setattr(sys, "stderr", _Terminal())
    run_sampler(target.log_prob, target.mean, names=target.names, max_steps=300,
                **{**FAST, "tau_factor": 1.0, "tau_rtol": 1.0, "rhat_max": None})
    assert sys.stderr.getvalue() == ""


def test_start_from_a_given_ball(target):
    rng = np.random.default_rng(0)
    ball = target.mean + 0.1 * target.sd * rng.standard_normal((16, 2))
    res = run_sampler(target.log_prob, ball, names=target.names, **FAST)
    assert isinstance(res, SampleResult) and res.converged


def test_result_is_frozen(target):
    res = run_sampler(target.log_prob, target.mean, names=target.names, **FAST)
    with pytest.raises(AttributeError):
        res.converged = False


def test_start_ball_outside_the_prior_is_refused(target):
    ball = np.tile(target.mean, (16, 1))
    ball[3] += 100 * target.sd
    with pytest.raises(TeffmcError, match="1 non-finite of 16"):
        run_sampler(target.log_prob, ball, names=target.names, **FAST)


@pytest.mark.parametrize(("change", "key"), [
    ({"n_walkers": 3}, "n_walkers"),
    ({"n_walkers": 16.0}, "n_walkers"),
    ({"max_steps": 0}, "max_steps"),
    ({"check_every": 0}, "check_every"),
    ({"min_steps": -1}, "min_steps"),
    ({"tau_factor": 0}, "tau_factor"),
    ({"tau_rtol": -0.01}, "tau_rtol"),
    ({"seed": -1}, "seed"),
    ({"seed": 1.5}, "seed"),
    ({"names": ["teff", "teff"]}, "names"),
])
def test_bad_arguments_raise_config_error(target, change, key):
    args = {"names": target.names, **FAST, **change}
    with pytest.raises(ConfigError, match=f"^{key}: should"):
        run_sampler(target.log_prob, target.mean, **args)


def test_bad_start_shape_raises_config_error(target):
    with pytest.raises(ConfigError, match=r"^x0: should have shape \(2,\) or \(16, 2\)"):
        run_sampler(target.log_prob, np.zeros(3), names=target.names, **FAST)


def test_check_every_step_works(target):
    """The smallest cadence: a tau estimate from one step must not break the rule."""
    kw = {**FAST, "check_every": 1}
    with pytest.warns(ConvergenceWarning):
        res = run_sampler(target.log_prob, target.mean, names=target.names, max_steps=30,
                          **kw)
    assert res.n_steps == 30
