"""Survey mode under faults: a worker killed mid-star, the scheduler killed, a tenth of
the configs broken, SIGTERM to the batch (split from test_batch.py; the tiny stars are
described there)."""

import json
import os
import signal
import subprocess
import time

import numpy as np
import pytest
from astropy.table import Table

import teffmc
from batch_helpers import Cluster, batch_cmd, kill_tree, make_stars
from small_star import small_star_config
from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.simulate import simulate_epoch


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


def _same_row(t, star, ref):
    row = t[list(t["star"]).index(star)]
    for col in ref.colnames:
        if col.endswith(("_median", "_p16", "_p84")) or col in ("n_steps", "status"):
            assert row[col] == ref[0][col], col


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
    _same_row(t, "slow", ref)  # resumed bit for bit (teffmc.sample)
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
    _same_row(t, "slow", ref)
    assert "resuming" in (out / "slow" / "log.txt").read_text()


def _blackbody_grid_file(path):
    """Planck surface fluxes tabulated as a grid file (Teff 3000-6000 K every 100 K,
    R ~ 2000 from 0.3 to 3 micron), so that a batch reads a grid file."""
    from teffmc.photosphere import Grid, planck_surface_flux

    teff = np.arange(3000.0, 6001.0, 100.0)
    wave = np.geomspace(3000.0, 30000.0, 4600)
    lf = np.log10(planck_surface_flux(wave, teff)).astype(np.float32)
    lf = np.broadcast_to(lf[:, None, None, :], (teff.size, 2, 2, wave.size))
    Grid(teff, np.array([0.0, 1.0]), np.array([-0.5, 0.0]), wave, lf,
         provenance={"source": "Planck's law, tabulated for a test"}, name="bb").write(path)
    return path


def test_a_tenth_of_configs_broken(tmp_path):
    survey = tmp_path / "survey"
    survey.mkdir()
    grid_file = _blackbody_grid_file(survey / "bb.h5")
    truth = {"teff": 4000.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 2.0}
    simulate_epoch(survey, "data", load_grid(grid_file), ModelSpec(), truth,
                   resolution=100.0, wave_range=(4500.0, 9000.0),
                   rng=np.random.default_rng(1))
    configs = []
    for k in range(1, 11):
        c = survey / f"s{k:02d}.toml"
        if k == 7:  # broken: not TOML
            c.write_text('grid = "blackbody"\n[priors\n')
        else:  # the same data and seed: every row must hold the same numbers
            c.write_text(small_star_config("data", 3000)
                         .replace('grid = "blackbody"', f'grid = "{grid_file}"'))
        configs.append(c)
    out = tmp_path / "out"
    t = teffmc.fit_many(configs, out, workers=2)
    assert list(t["status"]) == ["ok"] * 6 + ["failed"] + ["ok"] * 3
    reason = t["reason"][6]
    assert "s07.toml" in reason and "\n" not in reason and "internal error" not in reason
    assert any(ln.startswith("[") and "s07 failed" in ln and reason in ln
               for ln in (out / "batch.log").read_text().splitlines())
    ok = t[t["status"] == "ok"]
    for star in ok["star"][1:]:
        _same_row(ok, star, ok[:1])
    assert abs(ok["teff_median"][0] - 4000.0) < 100.0
    # the work that is the same for every star was done once per worker: the grid file
    # read once, the extinction tables (3 per star: spectrum, bands) computed once
    engine = json.loads((out / "batch-engine.json").read_text())
    workers = engine["workers"].values()
    assert sorted(sum((w["stars"] for w in workers), [])) == list(t["star"])
    for w in workers:
        n = len([s for s in w["stars"] if s != "s07"])  # s07 stopped at its config
        if n == 0:
            continue
        assert w["caches"]["grid"] == [n - 1, n], w
        hits, uses = w["caches"]["extinction"]
        assert uses - hits == 3 and uses == 3 * n, w
    assert "worker caches" in (out / "batch.log").read_text().splitlines()[-1]


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
    _same_row(Table.read(out / "batch.ecsv", format="ascii.ecsv"), "slow", ref)
    assert "resuming" in (out / "slow" / "log.txt").read_text()
