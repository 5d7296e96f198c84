"""Calibration: 68 % credible intervals hold the truth 68 % of the time.

Runs the study of ``bench/bench_sample.py`` (100 injections of a linear-Gaussian model
with a Teff-like and an A_V-like parameter; truths from the prior, so an exact sampler
covers 68 % on average; Cook, Gelman & Rubin 2006, from memory). With 100 injections the
binomial standard deviation is 4.7 %, so the +-8 % band is 1.7 sigma; the seed is fixed.
About 50 s of CPU (measured), hence ``slow``.
"""

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from teffmc.sample import find_start, run_sampler

BENCH = Path(__file__).resolve().parents[1] / "bench" / "bench_sample.py"


def _bench():
    spec = importlib.util.spec_from_file_location("bench_sample", BENCH)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.mark.slow
def test_68_percent_intervals_cover_68_percent():
    out = _bench().calibration_check(100, seed=1)
    assert out["n_converged"] == 100
    for name, fraction in out["coverage"].items():
        assert 0.60 <= fraction <= 0.76, (name, fraction)


def test_calibration_model_is_recovered_by_one_run():
    """Quick guard for the slow study: one injection, truth inside the 99.7 % interval."""
    bench = _bench()
    rng = np.random.default_rng(5)
    problem = bench.LinearGaussian(rng)
    x0 = find_start(problem.log_prob, problem.sample_prior, rng=rng)
    res = run_sampler(problem.log_prob, x0, names=bench.NAMES, n_walkers=16,
                      check_every=100, min_steps=0, progress=False, seed=5)
    lo, hi = np.percentile(res.flat, [0.135, 99.865], axis=0)
    assert res.converged and np.all((lo <= problem.truth) & (problem.truth <= hi))
    # posterior widths are those of the linear-Gaussian formula (Fisher matrix, exact here)
    design = bench.LinearGaussian.DESIGN / bench.LinearGaussian.SIGMA[:, None]
    sd = np.sqrt(np.diag(np.linalg.inv(design.T @ design))) * [100.0, 1.0]
    assert np.allclose(res.flat.std(axis=0), sd, rtol=0.1)
