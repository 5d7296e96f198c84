"""Run-folder safety (issue 13): one writer per run or batch folder, a completion marker
written last, replacement only with --overwrite and never leaving a half folder.

Acceptance checks: two fits (and two batches) started together into one folder -> one
wins, the other exits 2 with one line naming the holder, and the winner's posterior is
non-zero and equal to a solo run's; a kill after every file-system step of the finish
and replace paths never leaves a state that batch or report accepts unless it is the
whole old run or the whole new run.
"""

import json
import os
import shutil
import subprocess
import sys

import h5py
import numpy as np
import pytest

from teffmc import batch, posterior, runfolder
from teffmc.cli import main
from teffmc.config import ModelSpec
from teffmc.errors import ConfigError, DataError
from teffmc.photosphere import load_grid
from teffmc.run import fit
from teffmc.sampling_checkpoint import read_checkpoint, write_checkpoint
from teffmc.simulate import simulate_epoch

CONFIG = """\
grid = "blackbody"
[[epoch]]
photometry = "s_phot.ecsv"
spectra = [{ file = "s_spec.ecsv", resolution = 100.0, mismatch = "none" }]
[priors]
teff = { dist = "uniform", low = 3000, high = 6000 }
logg = { fixed = 0.0 }
mh = { fixed = 0.0 }
theta = { fixed = 2.0 }
[sampler]
n_walkers = 16
max_steps = 3000
min_steps = 400
check_every = 200
n_starts = 4
seed = 2
"""


@pytest.fixture(scope="module")
def star(tmp_path_factory):
    """A tiny star (blackbody grid, R = 100 spectrum and 7 bands; a few seconds a fit)
    and its solo run, the reference for the concurrent ones."""
    d = tmp_path_factory.mktemp("star")
    truth = {"teff": 4000.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 2.0}
    simulate_epoch(d, "s", load_grid("blackbody"), ModelSpec(), truth, resolution=100.0,
                   wave_range=(4500.0, 9000.0), rng=np.random.default_rng(1))
    (d / "s.toml").write_text(CONFIG)
    fit(d / "s.toml", d / "solo", quiet=True)
    return d


def _draws(run):
    dt, _ = posterior.load_run(run)
    return {n: posterior.draws(dt, n) for n in ("teff", "a_v")}


def _same_posterior(run, solo):
    a, b = _draws(run), _draws(solo)
    for n in a:
        assert np.all(a[n] != 0), n
        np.testing.assert_array_equal(a[n], b[n])


def _one_line_lock_refusal(stderr, folder):
    lines = stderr.strip().splitlines()
    assert len(lines) == 1, stderr
    assert f"{folder} is being written by another teffmc (pid " in lines[0]
    assert "Traceback" not in stderr


def _start_together(cmds):
    procs = [subprocess.Popen(c, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for c in cmds]
    return [(p.wait(timeout=300), *p.communicate()) for p in procs]


# ------------------------------------------------------------------------ concurrency

def test_two_fits_into_one_folder(star):
    out = star / "both"
    cmd = [sys.executable, "-m", "teffmc", "fit", str(star / "s.toml"), "--out", str(out),
           "--quiet"]
    res = _start_together([cmd, cmd])
    codes = sorted(r[0] for r in res)
    assert codes == [0, 2], [r[2] for r in res]
    loser = next(r for r in res if r[0] == 2)
    _one_line_lock_refusal(loser[2], out)
    assert runfolder.is_complete(out) and not (star / "both.partial").exists()
    assert not (star / "both.lock").exists()  # released
    _same_posterior(out, star / "solo")


def test_two_batches_into_one_folder(star):
    out = star / "batch"
    # the star's folder holds a run whose posterior.nc was zeroed after it finished (what
    # two unlocked batches once left): not finished, so the winner fits it again
    shutil.copytree(star / "solo", out / "s")
    with open(out / "s" / "posterior.nc", "r+b") as f:
        f.seek(4096)
        f.write(bytes(4096))
    assert batch.finished_summary(out / "s") is None
    cmd = [sys.executable, "-m", "teffmc", "batch", str(star / "s.toml"), "--out", str(out),
           "--quiet"]
    res = _start_together([cmd, cmd])
    codes = sorted(r[0] for r in res)
    assert codes == [0, 2], [r[2] for r in res]
    _one_line_lock_refusal(next(r for r in res if r[0] == 2)[2], out)
    assert batch.finished_summary(out / "s") == out / "s" / "summary.json"
    _same_posterior(out / "s", star / "solo")


def test_a_held_lock_refuses_fit_report_and_batch(star, tmp_path, capsys):
    run = tmp_path / "run"
    shutil.copytree(star / "solo", run)
    with runfolder.run_lock(run):
        lock = json.loads((tmp_path / "run.lock").read_text())
        assert lock["pid"] == os.getpid() and lock["host"] and lock["since"]
        for argv in (["fit", str(star / "s.toml"), "--out", str(run), "--overwrite"],
                     ["report", str(run)], ["report", str(run), "--format", "csv"]):
            assert main(argv) == 2
            _one_line_lock_refusal(capsys.readouterr().err.removeprefix("teffmc: error: "
                                                                          "--out:"), run)
    assert not (tmp_path / "run.lock").exists()
    with runfolder.batch_lock(tmp_path / "b"):
        assert main(["batch", str(star / "s.toml"), "--out", str(tmp_path / "b")]) == 2
        assert f"pid {os.getpid()}" in capsys.readouterr().err
    assert not (tmp_path / "b" / "s").exists()


def test_a_lock_left_by_a_killed_process_is_not_held(star, tmp_path):
    # the kernel drops a flock when its process dies; the file it leaves means nothing
    (tmp_path / "run.lock").write_text('{"pid": 1, "host": "x", "since": "y"}')
    with runfolder.run_lock(tmp_path / "run"):
        assert json.loads((tmp_path / "run.lock").read_text())["pid"] == os.getpid()


# --------------------------------------------------------------- overwrite and marker

def test_a_finished_run_is_replaced_only_with_overwrite(star, tmp_path, capsys):
    run = tmp_path / "run"
    shutil.copytree(star / "solo", run)
    before = (run / "complete.json").read_bytes()
    assert main(["fit", str(star / "s.toml"), "--out", str(run), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "holds a finished run: give --overwrite" in err
    assert (run / "complete.json").read_bytes() == before
    # an unfinished one (no marker) is not replaced silently either
    (run / "complete.json").unlink()
    assert main(["fit", str(star / "s.toml"), "--out", str(run), "--quiet"]) == 2
    assert "holds an unfinished run" in capsys.readouterr().err
    assert not (tmp_path / "run.partial").exists()


def test_overwrite_replaces_the_run(star, tmp_path):
    run = tmp_path / "run"
    shutil.copytree(star / "solo", run)
    (run / "stale.txt").write_text("from the old run")
    res = fit(star / "s.toml", run, quiet=True, overwrite=True)
    assert res.out == run.resolve() and not (run / "stale.txt").exists()
    assert runfolder.is_complete(run) and not list(tmp_path.glob(".run.old-*"))
    _same_posterior(run, star / "solo")


def test_marker_lists_sources_with_checksums(star):
    m = json.loads((star / "solo" / "complete.json").read_text())
    assert set(m["files"]) == {"posterior.nc", "summary.json", "run.toml", "log.txt"}
    assert m["best"] == "." and {"corner.png", "fit.png"} <= set(m["products"])
    for name, f in m["files"].items():
        assert f["bytes"] == (star / "solo" / name).stat().st_size


def test_report_keeps_the_run_finished(star, tmp_path):
    run = tmp_path / "run"
    shutil.copytree(star / "solo", run)
    assert main(["report", str(run)]) == 0
    assert runfolder.is_complete(run)


def test_report_refuses_unfinished_runs(star, tmp_path, capsys):
    run = tmp_path / "run"
    shutil.copytree(star / "solo", run)
    (run / "posterior.nc").unlink()
    assert main(["report", str(run)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "not a finished teffmc run: posterior.nc is missing" in err


# ------------------------------------------------------------ kill at every step

class Killed(BaseException):
    """Stands for kill -9: nothing after it runs (no handler catches a BaseException)."""


def _kill_after(n, fn, *args):
    """Run ``fn(*args)`` with every file-system change (rename, replace, unlink, rmdir,
    and so every step of shutil.rmtree) allowed ``n`` times, then killed. True if it
    ran to its end."""
    names = ("rename", "replace", "unlink", "remove", "rmdir")
    saved = {k: getattr(os, k) for k in names}
    count = [0]

    def wrap(real):
        def step(*a, **k):
            if count[0] >= n:
                raise Killed
            count[0] += 1
            return real(*a, **k)
        return step

    try:
        for k in names:
            setattr(os, k, wrap(saved[k]))
        fn(*args)
        return True
    except Killed:
        return False
    finally:
        for k, v in saved.items():
            setattr(os, k, v)


def _snapshot(folder):
    """Every file's bytes (the marker's without its time stamp)."""
    snap = {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}
    if "complete.json" in snap:
        marker = json.loads(snap["complete.json"])
        del marker["finished"]
        snap["complete.json"] = marker
    return snap


def _accepted(out):
    """What batch and report would accept at ``out`` (None: nothing)."""
    by_batch = batch.finished_summary(out)
    try:
        posterior.load_run(out)
        by_report = True
    except DataError:
        by_report = False
    assert (by_batch is not None) == by_report
    return _snapshot(out) if by_report else None


def _old_run(star, folder):
    """Another finished run (other numbers in summary.json, its own marker)."""
    shutil.copytree(star / "solo", folder)
    s = json.loads((folder / "summary.json").read_text())
    s["parameters"]["teff"]["median"] += 100.0
    (folder / "summary.json").write_text(json.dumps(s))
    runfolder.write_marker(folder)
    return _snapshot(folder)


@pytest.mark.parametrize("with_old", [True, False])
def test_kill_at_every_step_of_finish_and_replace(star, tmp_path, with_old):
    new_files = _snapshot(star / "solo")
    outcomes, n = [], 0
    while True:
        case = tmp_path / f"k{n}"
        out, partial = case / "run", case / "run.partial"
        old = _old_run(star, out) if with_old else None
        shutil.copytree(star / "solo", partial)
        (partial / "complete.json").unlink()  # as finish_run leaves it: no marker yet
        (partial / "chain.h5").write_bytes(b"checkpoint")
        done = _kill_after(n, runfolder.finish, partial, out)
        got = _accepted(out)
        # accepted only as the whole old run or the whole new run, nothing in between
        assert got is None or got == old or got == new_files, f"killed after {n} steps"
        outcomes.append("old" if got == old and got else "new" if got else "none")
        if done:
            break
        n += 1
    assert got == new_files and not list(case.glob(".run.old-*"))
    # the marker is written last: before it no kill gives "new"; the swap is one rename
    assert outcomes[0] == ("old" if with_old else "none") and outcomes[-1] == "new"
    assert n >= (8 if with_old else 3)  # unlink, marker, renames (+ the old run's removal)
    # a fit after a killed replace removes what the kill left aside
    leftovers = [c for c in tmp_path.glob("k*/.run.old-*")]
    assert leftovers or not with_old
    for c in leftovers:
        runfolder.remove_leftovers(c.parent / "run")
        assert not c.exists()


def test_kill_at_every_step_of_discard(star, tmp_path):
    n = 0
    while True:
        out = tmp_path / f"k{n}" / "run"
        old = _old_run(star, out)
        done = _kill_after(n, runfolder.discard, out)
        got = _accepted(out) if out.exists() else None
        assert got is None or got == old
        if done:
            break
        n += 1
    assert not out.exists() and n >= 5


def test_report_killed_midway_leaves_the_run_finished(star, tmp_path, monkeypatch):
    from teffmc import rereport
    from teffmc.report import output

    run = tmp_path / "run"
    shutil.copytree(star / "solo", run)

    def killed(*a, **k):
        raise Killed

    monkeypatch.setattr(output, "run_figures", killed)
    with pytest.raises(Killed):
        rereport.redraw(run)
    assert runfolder.is_complete(run)


# -------------------------------------------------------------------- checkpoints

def _checkpoint(path):
    rng = np.random.default_rng(3)
    chain, lp = rng.normal(size=(20, 6, 2)), rng.normal(size=(20, 6))
    state = np.random.RandomState(1).get_state()
    write_checkpoint(path, chain, lp, np.arange(6), state, n_saved=0, seed=7,
                     names=["a", "b"])
    return chain


def test_checkpoint_reads_back_with_its_checksum(tmp_path):
    chain = _checkpoint(tmp_path / "c.h5")
    np.testing.assert_array_equal(read_checkpoint(tmp_path / "c.h5")["chain"], chain)


@pytest.mark.parametrize("field", ["chain", "log_prob", "accepted"])
def test_a_hand_edited_checkpoint_is_refused(tmp_path, field):
    _checkpoint(tmp_path / "c.h5")
    with h5py.File(tmp_path / "c.h5", "a") as f:
        d = f["mcmc"][field]
        v = d[...]
        v.flat[3] += 1
        d[...] = v
    with pytest.raises(ConfigError, match="c.h5:checkpoint: checkpoint's chain does not "
                                          "match its checksum"):
        read_checkpoint(tmp_path / "c.h5")


def test_resume_with_an_edited_checkpoint_exits_2(star, tmp_path, capsys):
    from teffmc.run import prepare

    names = prepare(star / "s.toml", log=lambda m: None).space.names
    out = tmp_path / "r"
    ck = tmp_path / "r.partial" / "chain.h5"
    ck.parent.mkdir()
    rng = np.random.default_rng(0)
    chain = np.stack([rng.uniform(3900, 4100, (3, 16)), rng.uniform(0.4, 0.6, (3, 16))], -1)
    write_checkpoint(ck, chain, -rng.uniform(size=(3, 16)), np.zeros(16),
                     np.random.RandomState(2).get_state(), n_saved=0, seed=2, names=names)
    with h5py.File(ck, "a") as f:
        f["mcmc"]["chain"][1, 0, 0] = 4000.5
    argv = ["fit", str(star / "s.toml"), "--out", str(out), "--resume", "--quiet"]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "does not match its checksum" in err
    assert ck.is_file() and not out.exists()  # nothing deleted, nothing made
