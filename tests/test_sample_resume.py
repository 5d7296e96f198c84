"""Same seed, same numbers; checkpoint and resume after a hard kill (kill -9)."""

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import emcee
import numpy as np
import pytest

from teffmc.errors import ConfigError, ConvergenceWarning
from teffmc.sample import run_sampler
from teffmc.sampling_checkpoint import read_checkpoint
from test_sample_problems import gaussian_2d

# 2-D Gaussian, 16 walkers: converges after 1500 steps with seed 0 (min_steps: the stop
# rule alone stops at 500, too early to kill a run part way)
RUN = {"n_walkers": 16, "check_every": 100, "min_steps": 1500, "progress": False}
REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def target():
    return gaussian_2d()


@pytest.fixture(scope="module")
def reference(target):
    return run_sampler(target.log_prob, target.mean, names=target.names, seed=0, **RUN)


def assert_same(a, b):
    assert (a.n_steps, a.burn, a.thin, a.converged, a.reason, a.seed) == (
        b.n_steps, b.burn, b.thin, b.converged, b.reason, b.seed)
    for field in ("chain", "log_prob", "acceptance_fraction", "tau"):
        assert np.array_equal(getattr(a, field), getattr(b, field)), field


def test_same_seed_gives_identical_numbers(target, reference):
    again = run_sampler(target.log_prob, target.mean, names=target.names, seed=0, **RUN)
    assert reference.converged and reference.n_steps == 1500
    assert_same(reference, again)


def test_another_seed_gives_other_numbers(target, reference):
    other = run_sampler(target.log_prob, target.mean, names=target.names, seed=1, **RUN)
    assert other.seed == 1
    assert not np.array_equal(other.chain[:10], reference.chain[:10])


def test_no_seed_draws_one_and_records_it(target):
    a = run_sampler(target.log_prob, target.mean, names=target.names, **RUN)
    b = run_sampler(target.log_prob, target.mean, names=target.names, seed=a.seed, **RUN)
    assert_same(a, b)


def test_checkpointing_does_not_change_the_numbers(target, reference, tmp_path):
    path = tmp_path / "run.h5"
    with_file = run_sampler(target.log_prob, target.mean, names=target.names, seed=0,
                            checkpoint=path, **RUN)
    assert_same(reference, with_file)
    saved = read_checkpoint(path)
    assert saved["chain"].shape == (1500, 16, 2) and saved["seed"] == 0
    # emcee's own backend reads the file
    backend = emcee.backends.HDFBackend(path, read_only=True)
    assert backend.iteration == 1500
    assert np.array_equal(backend.get_chain(), saved["chain"])
    assert not os.path.exists(str(path) + ".tmp")


def test_resuming_a_finished_run_adds_no_step(target, reference, tmp_path):
    path = tmp_path / "run.h5"
    run_sampler(target.log_prob, target.mean, names=target.names, seed=0, checkpoint=path,
                **RUN)
    lines = []
    again = run_sampler(target.log_prob, target.mean, names=target.names, checkpoint=path,
                        resume=True, log=lines.append, **RUN)
    assert_same(reference, again)
    assert lines[0] == f"resuming {path} at step 1500" and len(lines) == 2
    assert read_checkpoint(path)["chain"].shape[0] == 1500


def test_resume_without_a_checkpoint_starts_afresh(target, reference, tmp_path):
    lines = []
    path = tmp_path / "none.h5"
    fresh = run_sampler(target.log_prob, target.mean, names=target.names, seed=0,
                        checkpoint=path, resume=True, log=lines.append, **RUN)
    assert_same(reference, fresh)
    assert lines[0].startswith("no steps in") and "afresh" in lines[0]


@pytest.mark.parametrize(("change", "key"), [
    ({"seed": 9}, "seed"),
    ({"names": ["teff", "other"]}, "names"),
    ({"n_walkers": 20}, "n_walkers"),
])
def test_resume_refuses_a_foreign_checkpoint(target, tmp_path, change, key):
    path = tmp_path / "run.h5"
    kw = {**RUN, "max_steps": 200, "tau_factor": 1e9}  # short, unconverged
    with pytest.warns(ConvergenceWarning):
        run_sampler(target.log_prob, target.mean, names=target.names, seed=0,
                    checkpoint=path, **kw)
    args = {"names": target.names, "seed": 0, **kw, **change}
    with pytest.raises(ConfigError, match=f"run.h5:{key}: checkpoint"):
        run_sampler(target.log_prob, target.mean, checkpoint=path, resume=True, **args)


CHILD = """
import sys, time
sys.path[:0] = [{repo!r}, {tests!r}]
from test_sample_problems import gaussian_2d
from teffmc.sample import run_sampler
g = gaussian_2d()

def slow(x):
    time.sleep(0.001)  # so that the parent can kill the run part way
    return g.log_prob(x)

run_sampler(slow, g.mean, names=g.names, seed=0, checkpoint={path!r}, **{run!r})
"""


def _iteration(path):
    """Steps in the checkpoint as emcee's own backend reads it (0 before the first chunk)."""
    backend = emcee.backends.HDFBackend(str(path), read_only=True)
    return backend.iteration if backend.initialized else 0


def test_resume_after_kill_9_matches_an_uninterrupted_run(target, reference, tmp_path):
    path = tmp_path / "killed.h5"
    code = textwrap.dedent(CHILD).format(repo=str(REPO), tests=str(REPO / "tests"),
                                         path=str(path), run=RUN)
    child = subprocess.Popen([sys.executable, "-c", code], stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 60
        while _iteration(path) < 300:
            if child.poll() is not None or time.monotonic() > deadline:
                pytest.fail(f"child ended or stalled: {child.stderr.read().decode()}")
            time.sleep(0.01)
        os.kill(child.pid, signal.SIGKILL)
        assert child.wait(timeout=30) == -signal.SIGKILL
    finally:
        if child.poll() is None:
            os.kill(child.pid, signal.SIGKILL)
            child.wait()
        child.stderr.close()
    before = read_checkpoint(path)
    n_before = before["chain"].shape[0]
    assert 300 <= n_before < reference.n_steps and n_before % RUN["check_every"] == 0

    resumed = run_sampler(target.log_prob, target.mean, names=target.names, seed=0,
                          checkpoint=path, resume=True, **RUN)
    assert_same(reference, resumed)
    after = read_checkpoint(path)
    assert after["chain"].shape[0] == reference.n_steps
    assert np.array_equal(after["chain"][:n_before], before["chain"])
    assert np.array_equal(after["log_prob"][:n_before], before["log_prob"])


def test_a_stale_temporary_file_is_harmless(target, reference, tmp_path):
    """A kill during a checkpoint write leaves run.h5.tmp behind; the next write replaces it."""
    path = tmp_path / "run.h5"
    Path(str(path) + ".tmp").write_bytes(b"half-written garbage")
    res = run_sampler(target.log_prob, target.mean, names=target.names, seed=0,
                      checkpoint=path, **RUN)
    assert_same(reference, res)
    assert not os.path.exists(str(path) + ".tmp")


def test_a_file_that_is_not_a_checkpoint_is_refused(target, tmp_path):
    path = tmp_path / "notes.h5"
    path.write_text("not HDF5")
    with pytest.raises(ConfigError, match="notes.h5:checkpoint: is not a readable"):
        run_sampler(target.log_prob, target.mean, names=target.names, seed=0,
                    checkpoint=path, resume=True, **RUN)


def test_resume_refuses_a_checkpoint_in_other_coordinates(target, tmp_path):
    """A chain written in one set of sampler coordinates is not resumed in another (its
    numbers would mean other parameters); checkpoints without the tag are "standard"."""

    class Colour:
        coordinate_tag = "colour"

        def __call__(self, x):
            return target.log_prob(x)

    path = tmp_path / "run.h5"
    kw = {**RUN, "max_steps": 200, "tau_factor": 1e9}  # short, unconverged
    with pytest.warns(ConvergenceWarning):
        run_sampler(target.log_prob, target.mean, names=target.names, seed=0,
                    checkpoint=path, **kw)
    assert read_checkpoint(path)["coordinates"] == "standard"
    with pytest.raises(ConfigError, match="run.h5:coordinates: checkpoint holds a chain in "
                                          "standard sampler coordinates"):
        run_sampler(Colour(), target.mean, names=target.names, seed=0, checkpoint=path,
                    resume=True, **kw)
