"""`teffmc fit` killed with SIGKILL mid-run, then `teffmc fit --resume` (issue: sampler).

The resumed run must complete with a chain as long as an uninterrupted run's, keep
every completed step, and give the same numbers (same seed, same numbers).
"""

import json
import os
import signal
import subprocess
import sys
import textwrap
import time

import h5py
import numpy as np
import pytest

from teffmc import posterior
from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 4500.0, "logg": 0.0, "mh": 0.0, "a_v": 0.8, "r_v": 3.1, "theta": 2.0}


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("resume")
    # data made by the fitting grid itself: no mismatch term (with it, Teff, A_V and theta
    # are nearly degenerate on a featureless blackbody and 16 walkers need > 20000 steps)
    simulate_epoch(tmp, "s", load_grid("blackbody"), ModelSpec(), TRUTH, resolution=300.0,
                   rng=np.random.default_rng(5))
    (tmp / "s.toml").write_text(textwrap.dedent("""\
        grid = "blackbody"
        [[epoch]]
        photometry = "s_phot.ecsv"
        spectra = [{ file = "s_spec.ecsv", resolution = 300.0, mismatch = "none" }]
        [priors]
        teff = { dist = "uniform", low = 3000, high = 7000 }
        logg = { fixed = 0.0 }
        mh = { fixed = 0.0 }
        [sampler]
        n_walkers = 16
        min_steps = 3000
        check_every = 100
        seed = 4
        """))
    return tmp


def _cmd(case, out, *extra):
    return [sys.executable, "-m", "teffmc", "fit", str(case / "s.toml"), "--out",
            str(case / out), "--quiet", *extra]


def _run(case, out, *extra):
    res = subprocess.run(_cmd(case, out, *extra), capture_output=True, text=True, timeout=600)
    assert res.returncode == 0, res.stderr


def _steps(path):
    try:
        with h5py.File(path, "r") as f:
            return int(f["mcmc"].attrs["iteration"])
    except (OSError, KeyError):
        return 0


@pytest.mark.slow
def test_kill_and_resume_equals_uninterrupted_run(case):
    _run(case, "full")

    proc = subprocess.Popen(_cmd(case, "killed"), stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    ckpt = case / "killed.partial" / "chain.h5"
    deadline = time.time() + 300
    while _steps(ckpt) < 500 and time.time() < deadline and proc.poll() is None:
        time.sleep(0.2)
    assert proc.poll() is None, "the run finished before it could be killed"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    with h5py.File(ckpt, "r") as f:
        saved = f["mcmc"]["chain"][: int(f["mcmc"].attrs["iteration"])].copy()
    assert saved.shape[0] >= 500

    _run(case, "killed", "--resume")
    a = json.loads((case / "full" / "summary.json").read_text())
    b = json.loads((case / "killed" / "summary.json").read_text())
    assert a["n_steps"] == b["n_steps"]
    assert b["converged"]
    da, db = (posterior.load(case / d / "posterior.nc") for d in ("full", "killed"))
    for name in ("teff", "a_v", "theta"):
        np.testing.assert_array_equal(posterior.draws(da, name), posterior.draws(db, name))
    assert saved.shape[0] <= b["n_steps"]
