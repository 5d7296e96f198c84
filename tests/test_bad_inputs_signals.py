"""Bad input by signal: Ctrl-C and SIGTERM during a fit or a batch give exit 130 with one
line on stderr that says what was kept and how to resume, and leave nothing behind when
nothing can be resumed (split from test_bad_inputs_more.py).
"""

import os
import shlex
import signal
import time

import pytest

from bad_inputs import TINY, config_file, fit_cli, no_nan, nothing_left, one_line, phot_table
from teffmc.cli import main


@pytest.fixture(scope="module")
def phot(tmp_path_factory):
    """Photometry of a blackbody star (all the tests need is something to fit)."""
    return phot_table(tmp_path_factory.mktemp("phot"))


# ---------------------------------------------------------------- 3. Ctrl-C and SIGTERM

# a fixed distance makes the derived distance constant: its R-hat is NaN (null in the file)
DIST = "distance_pc = { fixed = 100.0 }\n"


def _interrupt_after_sampling(monkeypatch, how):
    import teffmc.pipeline

    def stop(*args, **kwargs):
        if how == "sigterm":
            os.kill(os.getpid(), signal.SIGTERM)
            time.sleep(30)  # the handler raises KeyboardInterrupt in here
        raise KeyboardInterrupt

    monkeypatch.setattr(teffmc.pipeline, "finish_run", stop)


class _Terminated(Exception):
    pass


@pytest.fixture
def sigterm_guard():
    """Without teffmc's own handler a SIGTERM would end pytest: make it an exception."""
    def guard(signum, frame):
        raise _Terminated

    old = signal.signal(signal.SIGTERM, guard)
    yield guard
    signal.signal(signal.SIGTERM, old)


@pytest.mark.filterwarnings("ignore::teffmc.errors.ConvergenceWarning")  # 20 steps
@pytest.mark.parametrize("how", ["ctrl-c", "sigterm"])
def test_interrupted_fit_says_how_to_resume(tmp_path, capsys, monkeypatch, phot, how,
                                            sigterm_guard):
    path, out = config_file(tmp_path, phot, top=DIST), tmp_path / "run"
    with monkeypatch.context() as m:
        _interrupt_after_sampling(m, how)
        rc, err = fit_cli(capsys, path, out)
    one_line(rc, err, 130, "interrupted", "run.partial", "--resume", str(path))
    assert signal.getsignal(signal.SIGTERM) is sigterm_guard  # restored after the run
    assert (tmp_path / "run.partial" / "chain.h5").is_file() and not out.exists()
    # the line's command resumes the run
    cmd = shlex.split(err.split("`")[1])
    assert cmd == ["teffmc", "fit", str(path), "--out", str(out), "--resume"]
    rc = main([*cmd[1:], "--quiet"])
    assert rc == 0, capsys.readouterr().err
    assert (out / "summary.json").is_file() and not (tmp_path / "run.partial").exists()
    s = no_nan((out / "summary.json").read_text())  # 2. a real run's summary.json
    assert s["derived"]["distance_pc"]["r_hat"] is None


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_signal_to_a_running_fit(tmp_path, phot, sig):
    """A real `teffmc fit` process stopped mid-sampling: exit 130, one line, checkpoint kept."""
    import subprocess
    import sys

    path = config_file(tmp_path, phot, sampler=TINY.replace("max_steps = 20", "max_steps = 100000"))
    out = tmp_path / "run"
    proc = subprocess.Popen(  # SIGINT as in a terminal, even when the tests run in background
        [sys.executable, "-m", "teffmc", "fit", str(path), "--out", str(out), "--quiet"],
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    ckpt = tmp_path / "run.partial" / "chain.h5"
    deadline = time.time() + 300
    while not ckpt.exists() and proc.poll() is None and time.time() < deadline:
        time.sleep(0.1)
    assert proc.poll() is None, proc.stderr.read()
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=120)
    one_line(proc.returncode, err.strip(), 130, "interrupted", "run.partial", "--resume")
    assert ckpt.is_file() and not out.exists()


@pytest.mark.parametrize("hypotheses", [False, True])
def test_interrupt_before_the_first_checkpoint_leaves_nothing(tmp_path, capsys, monkeypatch,
                                                              phot, hypotheses):
    import teffmc.sample

    def stop(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(teffmc.sample, "find_start", stop)
    tail = ('[[hypothesis]]\nname = "bare"\n[[hypothesis]]\nname = "veiled"\nveil = "grey"\n'
            if hypotheses else "")
    sampler = TINY.replace("n_walkers = 8", "n_walkers = 10")  # 2 x 5 parameters (veiled)
    rc, err = fit_cli(capsys, config_file(tmp_path, phot, tail=tail, sampler=sampler),
                   tmp_path / "run")
    one_line(rc, err, 130, "interrupted before the first checkpoint", "nothing was kept")
    nothing_left(tmp_path / "run")


def test_sigterm_stops_batch_with_130(tmp_path, capsys, monkeypatch, phot, sigterm_guard):
    import teffmc.batch

    def stop(*args, **kwargs):
        os.kill(os.getpid(), signal.SIGTERM)
        time.sleep(30)
        raise AssertionError("SIGTERM did not stop the batch")

    monkeypatch.setattr(teffmc.batch, "fit_many", stop)
    rc = main(["batch", str(config_file(tmp_path, phot)), "--out", str(tmp_path / "b"), "--quiet"])
    err = capsys.readouterr().err.strip()
    one_line(rc, err, 130, "interrupted", "re-run the same command")
    assert signal.getsignal(signal.SIGTERM) is sigterm_guard
