"""Survey mode under faults: a worker killed mid-star, the scheduler killed, SIGTERM to the
batch (split from test_batch.py; the tiny stars are described there; a tenth of the configs
broken: tests/test_batch_broken.py)."""

import json
import os
import signal
import subprocess
import time

import pytest
from astropy.table import Table

import teffmc
from batch_helpers import Cluster, batch_cmd, kill_tree, make_stars, same_row
from small_star import small_star_config


@pytest.fixture(scope="module")
def stars(tmp_path_factory):
    return make_stars(tmp_path_factory.mktemp("stars"))


@pytest.fixture(scope="module")
def slow(stars):
    """A star whose sampling lasts long enough to be cut off after its first checkpoint,
    and its uninterrupted run (one worker)."""
    (stars / "slow.toml").write_text(small_star_config("alpha", 3000)
                                     .replace("min_steps = 200", "min_steps = 2000"))
    ref = stars.parent / "slow_reference"
    t = teffmc.fit_many([stars / "slow.toml"], ref)
    assert list(t["status"]) == ["ok"]
    return stars / "slow.toml", t


def _wait_for_checkpoint(out, star, proc, timeout=120):
    chain = out / f"{star}.partial" / "chain.h5"
    deadline = time.monotonic() + timeout
    while not chain.is_file():
        assert proc.poll() is None, "the batch ended before the star's first checkpoint"
        assert time.monotonic() < deadline, "no checkpoint"
        time.sleep(0.05)


def test_worker_killed_mid_star_resumes_elsewhere(stars, slow, tmp_path):
    cfg, ref = slow
    out = tmp_path / "killed"
    proc = subprocess.Popen(batch_cmd([cfg, stars / "alpha.toml"], out, "--workers", "2"),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for_checkpoint(out, "slow", proc)
        pid = json.loads((out / "slow.lock").read_text())["pid"]  # the worker fitting it
        assert pid != proc.pid
        os.kill(pid, signal.SIGKILL)
        _, err = proc.communicate(timeout=300)
    finally:
        if proc.poll() is None:
            kill_tree(proc)
    assert proc.returncode == 0, err
    t = Table.read(out / "batch.ecsv", format="ascii.ecsv")
    assert list(t["status"]) == ["ok", "ok"]
    same_row(t, "slow", ref)  # resumed bit for bit (teffmc.sample)
    assert "resuming" in (out / "slow" / "log.txt").read_text()
    assert not (out / "slow.partial").exists()


def test_scheduler_killed_then_rerun_resumes(stars, slow, tmp_path):
    cfg, ref = slow
    out = tmp_path / "lost"
    cluster = Cluster(tmp_path / "c1", n_workers=1)
    cmd = batch_cmd([stars / "alpha.toml", cfg], out, "--scheduler", cluster.address)
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for_checkpoint(out, "slow", proc)
        kill_tree(cluster.scheduler)
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            kill_tree(proc)
        cluster.close()  # the rest of the cluster goes too (its job ended)
    assert proc.returncode == 1, err
    lines = err.strip().splitlines()
    assert "Traceback" not in err, err
    assert lines[-1].startswith("teffmc: error: lost the Dask scheduler "
                                + cluster.address), err
    assert "re-run the same command" in lines[-1]
    t = Table.read(out / "batch.ecsv", format="ascii.ecsv")  # valid, the finished star in
    assert list(t["status"]) == ["ok", "pending"]
    # the same command again, once the cluster is back at the same address
    again = Cluster(tmp_path / "c2", n_workers=1, port=cluster.port)
    try:
        res = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    finally:
        again.close()
    assert res.returncode == 0, res.stderr
    assert "[1/2] alpha skipped (finished earlier, ok)" in res.stderr
    t = Table.read(out / "batch.ecsv", format="ascii.ecsv")
    assert list(t["status"]) == ["ok", "ok"]
    same_row(t, "slow", ref)
    assert "resuming" in (out / "slow" / "log.txt").read_text()


def test_sigterm_mid_star_keeps_the_checkpoint_and_rerun_resumes(slow, tmp_path):
    cfg, ref = slow
    out = tmp_path / "term"
    cmd = batch_cmd([cfg], out, "--workers", "1")
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for_checkpoint(out, "slow", proc)
        proc.send_signal(signal.SIGTERM)  # a job scheduler's stop
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            kill_tree(proc)
    assert proc.returncode == 130, err
    assert err.strip().splitlines()[-1].startswith("teffmc: interrupted") and \
        "Traceback" not in err, err
    assert (out / "slow.partial" / "chain.h5").is_file()
    assert list(Table.read(out / "batch.ecsv", format="ascii.ecsv")["status"]) == ["pending"]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    same_row(Table.read(out / "batch.ecsv", format="ascii.ecsv"), "slow", ref)
    assert "resuming" in (out / "slow" / "log.txt").read_text()
