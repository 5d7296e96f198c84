"""More bad input found by fault testing: exit 2 (130 for signals) with one line on stderr,
no traceback, and no run folder left behind unless it can be resumed and the line says so.
"""

import math
import os
import signal
import time
from dataclasses import replace

import numpy as np
import pytest
from scipy import stats

from bad_inputs import config_file, fit_cli, no_nan, nothing_left, one_line, phot_table
from teffmc.config import load_config
from teffmc.errors import ConfigError
from teffmc.parameters import ParameterSpace
from teffmc.photosphere import BlackbodyGrid
from teffmc.priors import Prior


@pytest.fixture(scope="module")
def phot(tmp_path_factory):
    """Photometry of a blackbody star (all the tests need is something to fit)."""
    return phot_table(tmp_path_factory.mktemp("phot"))


# ---------------------------------------------------------------- 1. distance / parallax

@pytest.mark.parametrize("key, prior, shown", [
    ("distance_pc", "{ dist = \"normal\", mean = -100.0, sd = 10.0 }", "-100"),
    ("distance_pc", "{ dist = \"normal\", mean = 0.0, sd = 10.0 }", None),  # accepted: 0.5
    ("parallax_mas", "{ dist = \"normal\", mean = -5.0, sd = 1.0 }", "-5"),
    ("parallax_mas", "{ dist = \"normal\", mean = -1.0, sd = 0.5 }", None),  # 0.023 above 0
])
def test_distance_prior_mostly_below_zero_is_refused(tmp_path, capsys, phot, key, prior, shown):
    path = config_file(tmp_path, phot, top=f"{key} = {prior}\n")
    if shown is None:  # enough probability above 0: accepted, its positive part is used
        assert getattr(load_config(path), key).kind == "normal"
        return
    rc, err = fit_cli(capsys, path, tmp_path / "run")
    one_line(rc, err, 2, "star.toml", key, shown, "above 0")
    nothing_left(tmp_path / "run")


class _Timeout(Exception):
    pass


def _alarm(signum, frame):
    raise _Timeout


@pytest.mark.parametrize("key, prior, truth", [
    # a parallax prior almost entirely below 0 (config.py refuses it; derived_quantities
    # must not loop on it either): the redraw loop needed ~1e15 rounds
    ("parallax_mas", Prior("normal", mean=-8.0, sd=1.0), (-8.0, 1.0)),
    ("parallax_mas", Prior("normal", mean=-1.0, sd=0.5), (-1.0, 0.5)),
    ("distance_pc", Prior("normal", mean=50.0, sd=100.0), (50.0, 100.0)),
])
def test_derived_distance_draws_the_positive_part(tmp_path, phot, key, prior, truth):
    from teffmc.derived import derived_quantities
    from teffmc.run import prepare

    cfg = replace(load_config(config_file(tmp_path, phot)), **{key: prior})
    prep = prepare(cfg, log=lambda line: None)
    rng = np.random.default_rng(7)
    flat = prep.space.sample_prior(rng, 2000)
    old = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(60)
    try:
        t0 = time.perf_counter()
        dist = derived_quantities(prep, flat, rng)["distance_pc"]
        took = time.perf_counter() - t0
    except _Timeout:
        pytest.fail("derived_quantities did not finish in 60 s")
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)
    assert took < 30
    assert np.all(np.isfinite(dist)) and np.all(dist > 0)
    x = 1000.0 / dist if key == "parallax_mas" else dist
    mean, sd = truth
    ref = stats.truncnorm(-mean / sd, np.inf, loc=mean, scale=sd)  # the prior, x > 0
    assert stats.kstest(x, ref.cdf).pvalue > 1e-3


# ---------------------------------------------------------------- 2. strict JSON

def test_summary_json_writes_null_not_nan(tmp_path):
    from teffmc.compare import _write
    from teffmc.report.tables import write_summary
    from teffmc.run import summary_to_text

    stats_ = {"median": 1.0, "p16": 0.5, "p84": 1.5, "mean": 1.0, "sd": 0.5,
              "r_hat": float("nan"), "ess_bulk": np.float64("nan"), "ess_tail": np.inf}
    summary = {"converged": False, "reason": "x", "tau": {"teff": np.float32("nan")},
               "parameters": {"teff": stats_}, "derived": {"distance_pc": dict(stats_)},
               "goodness_of_fit": {"a.b": {"chi2_nu": float("nan"), "n_points": 3,
                                           "rms_sigma": 1.0, "ppc_p": -np.inf}},
               "evidence": {"log_z": float("nan"), "log_z_err": float("nan")}}
    write_summary(summary, tmp_path / "summary.json", tmp_path / "summary.ecsv")
    back = no_nan((tmp_path / "summary.json").read_text())
    assert back["parameters"]["teff"]["r_hat"] is None
    assert back["parameters"]["teff"]["ess_bulk"] is None
    assert back["parameters"]["teff"]["ess_tail"] is None
    assert back["tau"]["teff"] is None and back["goodness_of_fit"]["a.b"]["ppc_p"] is None
    assert back["parameters"]["teff"]["median"] == 1.0
    # readers of summary.json: the terminal text, and writing it again (teffmc report)
    text = summary_to_text(back)
    assert "r_hat n/a" in text and "chi2/nu n/a" in text
    write_summary(back, tmp_path / "again.json", tmp_path / "again.ecsv")
    from astropy.table import Table

    t = Table.read(tmp_path / "again.ecsv", format="ascii.ecsv")
    assert np.isnan(t["r_hat"][0]) and t["median"][0] == 1.0
    # compare.json: ln Z of runs without evidence is NaN in memory, null in the file
    rows = [{"run": "a", "elpd_loo": 1.0, "se": 0.1, "elpd_diff": 0.0, "se_diff": 0.0,
             "log_z": np.nan, "log_z_err": np.nan, "log_z_diff": np.nan,
             "log_z_diff_err": 0.0, "n_points": 3, "n_bad_k": 0, "max_k": 0.1,
             "converged": True}]
    _write(rows, tmp_path)
    comp = no_nan((tmp_path / "compare.json").read_text())
    assert comp["runs"][0]["log_z"] is None and comp["runs"][0]["elpd_loo"] == 1.0


# ---------------------------------------------------------------- 4, 5. [sampler]

@pytest.mark.parametrize("seed", [2**64, 2**63, -1])
def test_seed_out_of_range(tmp_path, capsys, phot, seed):
    path = config_file(tmp_path, phot, sampler=f"[sampler]\nseed = {seed}\n")
    rc, err = fit_cli(capsys, path, tmp_path / "run")
    one_line(rc, err, 2, "star.toml", "sampler.seed", str(seed), "2**63")
    nothing_left(tmp_path / "run")


def test_largest_seed_is_accepted(tmp_path, phot):
    path = config_file(tmp_path, phot, sampler=f"[sampler]\nseed = {2**63 - 1}\n")
    assert load_config(path).sampler.seed == 2**63 - 1


def test_min_steps_above_max_steps(tmp_path, capsys, phot):
    path = config_file(tmp_path, phot, sampler="[sampler]\nmax_steps = 100\nmin_steps = 500\n")
    rc, err = fit_cli(capsys, path, tmp_path / "run")
    one_line(rc, err, 2, "star.toml", "sampler.min_steps", "500", "100")
    nothing_left(tmp_path / "run")
    # a short run keeping the default min_steps (1000) stays allowed: it ends not converged
    ok = config_file(tmp_path, phot, sampler="[sampler]\nmax_steps = 100\n")
    assert load_config(ok).sampler.min_steps == 1000


# ---------------------------------------------------------------- 6. nothing to sample

ALL_FIXED = """\
    [priors]
    teff = { fixed = 4000.0 }
    logg = { fixed = 0.0 }
    mh = { fixed = 0.0 }
    theta = { fixed = 2.0 }
    a_v = { fixed = 0.5 }
    """


@pytest.mark.parametrize("tail", [
    "",
    # the first hypothesis has free veil parameters: the second must be refused before the
    # first is fitted
    '[[hypothesis]]\nname = "veiled"\nveil = "grey"\n[[hypothesis]]\nname = "bare"\n',
])
def test_every_parameter_fixed(tmp_path, capsys, phot, tail):
    path = config_file(tmp_path, phot, priors=ALL_FIXED, tail=tail)
    rc, err = fit_cli(capsys, path, tmp_path / "run")
    one_line(rc, err, 2, "star.toml", "priors", "nothing to sample")
    nothing_left(tmp_path / "run")


# ---------------------------------------------------------------- 7. names in figure titles

@pytest.mark.parametrize("name, converged", [
    ("$\\frac{a", True),        # the TOML string name = "$\\frac{a"
    ("$\\frac{a$", True),       # an even number of $ is parsed as mathtext: fails
    ("$\\frac{a$", False),
    ("star $x$ \\ $\\sqrt{$", False),
])
def test_figure_title_with_mathtext_characters(tmp_path, name, converged):
    from teffmc.report import corner_figure, fit_figure

    rng = np.random.default_rng(1)
    corner_figure(rng.normal(size=(300, 2)), ["teff", "a_v"], tmp_path / "corner.png",
                  converged=converged, title=name)
    wave = np.linspace(5000.0, 6000.0, 50)
    panels = [
        {"kind": "spectrum", "label": "epoch obs: spectrum1", "x": wave,
         "data": np.ones(50), "err": np.full(50, 0.1), "draws": rng.normal(1, 0.1, (5, 50))},
        {"kind": "photometry", "label": "epoch obs: photometry", "x": np.array([4400., 5500.]),
         "data": np.array([6.0, 5.0]), "err": np.array([0.02, 0.02]),
         "draws": rng.normal(5.5, 0.1, (5, 2)), "bands": ["bessell-B", "bessell-V"]},
    ]
    fit_figure(panels, tmp_path / "fit.png", converged=converged, title=name)
    for f in ("corner.png", "fit.png"):
        assert (tmp_path / f).stat().st_size > 1000


# ---------------------------------------------------------------- 8. --out

def test_out_is_an_existing_file(tmp_path, capsys, phot):
    out = tmp_path / "run"
    out.write_text("keep me")
    rc, err = fit_cli(capsys, config_file(tmp_path, phot), out)
    one_line(rc, err, 2, "--out", str(out), "not a folder")
    assert out.read_text() == "keep me"
    assert not (tmp_path / "run.partial").exists()


def test_out_inside_a_file(tmp_path, capsys, phot):
    (tmp_path / "afile").write_text("x")
    out = tmp_path / "afile" / "run"
    rc, err = fit_cli(capsys, config_file(tmp_path, phot), out)
    one_line(rc, err, 2, "--out", str(tmp_path / "afile"), "not a folder")
    assert (tmp_path / "afile").read_text() == "x"


@pytest.mark.skipif(not os.path.isdir("/sys/kernel"), reason="needs Linux /sys")
def test_out_where_no_folder_can_be_made(tmp_path, capsys, phot):
    # /sys refuses new folders even to root (os.access would say yes)
    out = "/sys/kernel/teffmc-test-run"
    rc, err = fit_cli(capsys, config_file(tmp_path, phot), out)
    one_line(rc, err, 2, "--out", out, "cannot write in /sys/kernel")
    assert not os.path.exists(out) and not os.path.exists(out + ".partial")


# ---------------------------------------------------------------- 9. truncated normal

CASES = [  # (mean, sd, low, high)
    (0.0, 1.0, 50.0, 60.0),      # the mean 50 sd below the bounds
    (0.0, 1.0, -60.0, -50.0),    # and above them
    (0.0, 1.0, 8.0, 9.0),
    (0.0, 1.0, -1.0, 1.0),
    (3.0, 2.0, -1.0, 0.5),
    (5.0, 1.0, 0.0, math.inf),
    (-8.0, 1.0, 0.0, math.inf),  # a parallax prior's positive part
    (0.0, 1.0, -math.inf, -30.0),
]


@pytest.mark.parametrize("mean, sd, low, high", CASES)
def test_truncnormal_matches_scipy(mean, sd, low, high):
    p = Prior("truncnormal", mean=mean, sd=sd, low=low, high=high)
    ref = stats.truncnorm((low - mean) / sd, (high - mean) / sd, loc=mean, scale=sd)
    u = np.array([0.0, 1e-12, 1e-3, 0.25, 0.5, 0.75, 0.999, 1 - 1e-12])
    x = ref.ppf(u)
    np.testing.assert_allclose(p.ppf(u), x, rtol=1e-9, atol=1e-12)
    x = x[np.isfinite(x)]   # u = 0 of an unbounded side is -inf
    lp = p.logpdf(x)
    assert np.all(np.isfinite(lp))
    np.testing.assert_allclose(lp, ref.logpdf(x), rtol=1e-9, atol=1e-9)
    assert p.logpdf(low - 1.0) == -np.inf and p.logpdf(high + 1.0) == -np.inf
    draws = p.sample(np.random.default_rng(3), 4000)
    assert np.all((draws >= low) & (draws <= high))
    assert stats.kstest(draws, ref.cdf).pvalue > 1e-3


def test_truncnormal_far_from_its_bounds_in_a_config(tmp_path, phot, rng):
    path = config_file(tmp_path, phot, priors="""\
        [priors]
        a_v = { dist = "truncnormal", mean = 0.0, sd = 0.01, low = 0.5, high = 0.6 }
        """)
    space = ParameterSpace(load_config(path), BlackbodyGrid.BOUNDS)
    x = space.sample_prior(rng, 500)
    a_v = x[:, space.names.index("a_v")]
    assert np.all((a_v >= 0.5) & (a_v <= 0.6)) and np.all(np.isfinite(space.log_prior(x)))


def test_truncnormal_whose_mass_underflows_is_refused(tmp_path, capsys, phot):
    with pytest.raises(ValueError, match="underflows"):
        Prior("truncnormal", mean=0.0, sd=1e-160, low=1.0, high=2.0)
    path = config_file(tmp_path, phot, priors="""\
        [priors]
        a_v = { dist = "truncnormal", mean = 0.0, sd = 1e-160, low = 1.0, high = 2.0 }
        """)
    with pytest.raises(ConfigError, match="priors.a_v"):
        load_config(path)
    rc, err = fit_cli(capsys, path, tmp_path / "run")
    one_line(rc, err, 2, "star.toml", "priors.a_v", "underflows")
    nothing_left(tmp_path / "run")
