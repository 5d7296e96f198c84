"""Survey mode: `teffmc batch` / teffmc.fit_many on tiny stars, some of them broken, on an
embedded Dask LocalCluster and on a separately started `dask scheduler` + `dask worker`.

Tiny stars: the blackbody grid, data made by that grid (mismatch = "none"), 2 free
parameters; a fit takes a few seconds."""

import json
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import psutil
import pytest
from astropy.table import Table

import teffmc
from teffmc import batch
from teffmc.cli import main
from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.simulate import simulate_epoch

from small_star import small_star_config

STARS = ("alpha", "beta", "gamma")
STATUS = {"alpha": "ok", "beta": "not_converged", "gamma": "failed"}


@pytest.fixture(scope="module")
def stars(tmp_path_factory):
    d = tmp_path_factory.mktemp("stars")
    grid = load_grid("blackbody")
    for name, teff in (("alpha", 4000.0), ("beta", 3600.0)):
        truth = {"teff": teff, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 2.0}
        simulate_epoch(d, name, grid, ModelSpec(), truth, resolution=100.0,
                       wave_range=(4500.0, 9000.0), rng=np.random.default_rng(1))
    (d / "alpha.toml").write_text(small_star_config("alpha", 3000))
    (d / "beta.toml").write_text(small_star_config("beta", 200))
    (d / "gamma.toml").write_text(small_star_config("nowhere", 3000))
    return d


@pytest.fixture(scope="module")
def first(stars):
    """The batch run once through the real command line, one worker."""
    out = stars.parent / "batch1"
    res = subprocess.run([sys.executable, "-m", "teffmc", "batch",
                          *[str(stars / f"{s}.toml") for s in STARS], "--out", str(out)],
                         capture_output=True, text=True, timeout=300)
    return res, out


def test_exit_status_and_statuses(first):
    res, out = first
    assert res.returncode == 1, res.stderr
    t = Table.read(out / "batch.ecsv", format="ascii.ecsv")
    assert list(t["star"]) == list(STARS)
    assert [t["status"][i] for i in range(3)] == [STATUS[s] for s in STARS]
    gamma = t[2]
    assert "nowhere_spec.ecsv" in gamma["reason"] and "gamma.toml" in gamma["reason"]
    assert "\n" not in gamma["reason"]
    assert np.ma.is_masked(gamma["n_steps"]) and np.ma.is_masked(gamma["teff_median"])
    assert not (out / "gamma").exists()
    assert "NOT CONVERGED" in t[1]["caution"]
    assert "max_steps = 200" in t[1]["reason"]
    assert np.ma.is_masked(t[0]["caution"]) or t[0]["caution"] == ""
    for col in ("wall_time_s", "n_steps", "teff_median", "teff_p16", "teff_p84",
                "a_v_median", "a_v_p16", "a_v_p84", "config", "reason", "run"):
        assert col in t.colnames, col


def test_table_copies_each_summary_exactly(first):
    _, out = first
    t = Table.read(out / "batch.ecsv", format="ascii.ecsv")
    for row in t[:2]:
        s = json.loads((out / row["run"] / "summary.json").read_text())
        assert row["n_steps"] == s["n_steps"]
        assert set(s["parameters"]) == {"teff", "a_v"}
        for name, st in s["parameters"].items():
            for k in ("median", "p16", "p84"):
                assert row[f"{name}_{k}"] == st[k], (row["star"], name, k)
    # the converged star's posterior is where the simulation put it
    assert abs(t[0]["teff_median"] - 4000.0) < 100.0


def test_progress_lines_and_log(first):
    res, out = first
    lines = res.stderr.strip().splitlines()
    assert any(ln.startswith("[1/3] alpha ok ") and "ETA" in ln for ln in lines), res.stderr
    assert any(ln.startswith("[2/3] beta not_converged ") for ln in lines), res.stderr
    assert any(ln.startswith("[3/3] gamma failed ") and "nowhere_spec.ecsv" in ln
               for ln in lines), res.stderr
    assert "it/s" not in res.stderr and "%|" not in res.stderr  # no per-star progress bars
    assert (out / "batch.log").read_text().strip().splitlines() == lines


def test_rerun_skips_finished_stars(first, stars):
    _, out = first
    before = {s: os.stat(out / s / "summary.json").st_mtime_ns for s in ("alpha", "beta")}
    t0 = Table.read(out / "batch.ecsv", format="ascii.ecsv")
    t = teffmc.fit_many([stars / f"{s}.toml" for s in STARS], out)
    assert [os.stat(out / s / "summary.json").st_mtime_ns for s in ("alpha", "beta")] == \
        list(before.values())
    log = (out / "batch.log").read_text().splitlines()
    assert "[1/3] alpha skipped (finished earlier, ok)" in log
    assert "[2/3] beta skipped (finished earlier, not_converged)" in log
    assert any(ln.startswith("[3/3] gamma failed") for ln in log[-3:])  # tried again
    assert list(t["status"]) == [STATUS[s] for s in STARS]
    for col in ("teff_median", "a_v_p84", "n_steps", "wall_time_s"):  # wall times kept
        assert list(t[col][:2]) == list(t0[col][:2]), col
    assert t.colnames == Table.read(out / "batch.ecsv", format="ascii.ecsv").colnames


def _same_table(out1, out2):
    """The tables of two batches of the same stars hold the same numbers."""
    t1 = Table.read(out1 / "batch.ecsv", format="ascii.ecsv")
    t2 = Table.read(out2 / "batch.ecsv", format="ascii.ecsv")
    assert t1.colnames == t2.colnames
    for col in t1.colnames:
        if col in ("wall_time_s", "config", "reason"):
            continue
        assert [str(v) for v in t1[col]] == [str(v) for v in t2[col]], col
    ok = t1["status"] != "failed"
    assert list(t1["reason"][ok]) == list(t2["reason"][ok])  # the sampler's own words
    return t2


def test_two_workers_and_list_give_the_same_table(first, stars):
    _, out1 = first
    lst = stars.parent / "lists" / "survey.txt"
    lst.parent.mkdir()
    lst.write_text("# the survey\n" + "".join(f"../{stars.name}/{s}.toml\n" for s in STARS))
    out2 = stars.parent / "batch2"
    assert main(["batch", "--list", str(lst), "--out", str(out2), "--workers", "2",
                 "--quiet"]) == 1
    _same_table(out1, out2)
    log = (out2 / "batch.log").read_text()
    assert "2 worker(s) (Dask LocalCluster)" in log.splitlines()[0]
    engine = json.loads((out2 / "batch-engine.json").read_text())
    assert sum(len(w["stars"]) for w in engine["workers"].values()) == 3


def test_duplicate_stems_refused_before_any_work(stars, tmp_path, capsys):
    other = tmp_path / "elsewhere"
    other.mkdir()
    (other / "alpha.toml").write_text((stars / "alpha.toml").read_text())
    out = tmp_path / "never"
    rc = main(["batch", str(stars / "alpha.toml"), str(stars / "beta.toml"),
               str(other / "alpha.toml"), "--out", str(out)])
    err = capsys.readouterr().err.strip()
    assert rc == 2
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    assert "alpha" in err and str(other / "alpha.toml") in err and \
        str(stars / "alpha.toml") in err
    assert not out.exists()


@pytest.mark.parametrize("argv, needle", [
    (["--workers", "0"], "--workers"),
    (["--list", "no-such-list.txt"], "no-such-list.txt"),
])
def test_bad_batch_input_exit_2(stars, tmp_path, capsys, argv, needle):
    rc = main(["batch", str(stars / "alpha.toml"), "--out", str(tmp_path / "o"), *argv])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1 and needle in err, err
    assert not (tmp_path / "o").exists()


def test_redo_fits_again(stars, tmp_path):
    out = tmp_path / "redo"
    cfg = [stars / "beta.toml"]
    t1 = teffmc.fit_many(cfg, out)
    m1 = os.stat(out / "beta" / "summary.json").st_mtime_ns
    t2 = teffmc.fit_many(cfg, out, redo=True)
    assert os.stat(out / "beta" / "summary.json").st_mtime_ns != m1
    assert "skipped" not in (out / "batch.log").read_text()
    assert t1["teff_median"][0] == t2["teff_median"][0]  # same seed, same numbers


def _crash_one(config, out, redo):
    """Stand-in for batch.task.fit_star: the worker process dies on star 'beta'."""
    if config.endswith("beta.toml"):
        os._exit(3)
    return batch.task.fit_star(config, out, redo)


def test_a_dying_worker_fails_only_its_star(stars, tmp_path, monkeypatch):
    monkeypatch.setattr(batch.engine, "TASK", _crash_one)
    out = tmp_path / "crash"
    t = teffmc.fit_many([stars / "gamma.toml", stars / "beta.toml"], out, workers=2)
    assert list(t["status"]) == ["failed", "failed"]
    assert "worker process died" in t["reason"][1]
    assert "nowhere_spec.ecsv" in t["reason"][0]  # its own reason, not its neighbour's


def test_internal_error_gives_one_line_and_a_traceback(stars, tmp_path, monkeypatch):
    import teffmc.run

    def broken(*args, **kwargs):
        raise RuntimeError("something\nbroke")

    monkeypatch.setattr(teffmc.run, "fit", broken)
    res = batch.task.fit_star(str(stars / "alpha.toml"), str(tmp_path / "alpha"), False)
    assert not res["ok"]
    assert res["reason"] == "internal error: RuntimeError: something broke"
    assert "Traceback" in res["traceback"]


def test_parquet_holds_the_same_table(first):
    import pyarrow.parquet as pq

    _, out = first
    t = Table.read(out / "batch.ecsv", format="ascii.ecsv")
    pt = pq.read_table(out / "batch.parquet")
    assert pt.column_names == t.colnames
    for col in t.colnames:
        got = pt.column(col).to_pylist()
        want = [None if np.ma.is_masked(v) else v for v in t[col]]
        want = [("" if v is None else v) if t[col].dtype.kind in "US" else v for v in want]
        assert got == want, col
    assert pt.schema.field("wall_time_s").metadata[b"unit"] == b"s"
    meta = json.loads(pt.schema.metadata[b"teffmc"])
    assert meta["teffmc"] == teffmc.__version__ and "status" in meta["note"]


def test_bad_scheduler_input(stars, tmp_path, capsys):
    rc = main(["batch", str(stars / "alpha.toml"), "--out", str(tmp_path / "o"),
               "--workers", "2", "--scheduler", "tcp://127.0.0.1:9"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and "not both" in err and len(err.splitlines()) == 1, err
    assert not (tmp_path / "o").exists()


def test_unreachable_scheduler_is_one_line_exit_1(stars, tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(batch.engine, "CONNECT_TIMEOUT", 2.0)
    addr = f"tcp://127.0.0.1:{_free_port()}"  # nobody listens there
    rc = main(["batch", str(stars / "alpha.toml"), "--out", str(tmp_path / "o"),
               "--scheduler", addr])
    err = capsys.readouterr().err.strip()
    assert rc == 1 and len(err.splitlines()) == 1, err
    assert err.startswith("teffmc: error: cannot reach the Dask scheduler at " + addr), err
    assert not (tmp_path / "o" / "alpha").exists()


# ------------------------------------------------------ a separately started Dask cluster

def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _kill_tree(proc):
    """SIGKILL a process and everything it started (a `dask worker` and its workers)."""
    try:
        procs = psutil.Process(proc.pid).children(recursive=True)
    except psutil.NoSuchProcess:
        procs = []
    for p in [*procs]:
        try:
            p.kill()
        except psutil.NoSuchProcess:
            pass
    proc.kill()
    proc.wait(timeout=30)
    psutil.wait_procs(procs, timeout=30)


class _Cluster:
    """`dask scheduler` and `dask worker` subprocesses on localhost (one BLAS thread)."""

    def __init__(self, folder, n_workers, port=None):
        self.port = port or _free_port()
        self.address = f"tcp://127.0.0.1:{self.port}"
        self.folder, self.procs, self.logs = Path(folder), [], []
        self.folder.mkdir(parents=True, exist_ok=True)
        env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1",
                   MKL_NUM_THREADS="1")
        self.scheduler = self._start(["scheduler", "--host", "127.0.0.1", "--port",
                                      str(self.port), "--no-dashboard"], env, "scheduler")
        self.worker = self._start(["worker", self.address, "--nworkers", str(n_workers),
                                   "--nthreads", "1", "--no-dashboard", "--local-directory",
                                   str(self.folder / "dask-worker-space")], env, "worker")
        self._wait_for(n_workers)

    def _start(self, args, env, name):
        log = open(self.folder / f"{name}.log", "a")  # noqa: SIM115 (closed in close())
        self.logs.append(log)
        p = subprocess.Popen([sys.executable, "-m", "dask", *args], env=env, stdout=log,
                             stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL)
        self.procs.append(p)
        return p

    def _wait_for(self, n):
        from distributed import Client

        deadline = time.monotonic() + 60
        while True:
            try:
                with Client(self.address, timeout=5, set_as_default=False) as c:
                    c.wait_for_workers(n, timeout=max(deadline - time.monotonic(), 1))
                    return
            except (OSError, TimeoutError):
                if time.monotonic() > deadline:
                    self.close()
                    raise

    def close(self):
        for p in self.procs:
            _kill_tree(p)
        for f in self.logs:
            f.close()


@pytest.fixture(scope="module")
def dask_cluster(tmp_path_factory):
    c = _Cluster(tmp_path_factory.mktemp("cluster"), n_workers=2)
    yield c
    c.close()


def _batch_cmd(configs, out, *extra):
    return [sys.executable, "-m", "teffmc", "batch", *[str(c) for c in configs],
            "--out", str(out), *extra]


def test_attached_cluster_gives_the_same_table(first, stars, dask_cluster):
    _, out1 = first
    out = stars.parent / "batch_attached"
    res = subprocess.run(_batch_cmd([stars / f"{s}.toml" for s in STARS], out,
                                    "--scheduler", dask_cluster.address),
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 1, res.stderr
    _same_table(out1, out)
    head = (out / "batch.log").read_text().splitlines()[0]
    assert f"Dask scheduler {dask_cluster.address} with 2 worker(s)" in head
    engine = json.loads((out / "batch-engine.json").read_text())
    assert engine["engine"] == dask_cluster.address
    pids = {int(w.rsplit(":", 1)[1]) for w in engine["workers"]}
    workers = {p.pid for p in psutil.Process(dask_cluster.worker.pid).children(True)}
    assert pids <= workers  # the stars ran on the cluster's processes, not in the batch


# ---------------------------------------------------------------------------- faults

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
    proc = subprocess.Popen(_batch_cmd([cfg, stars / "alpha.toml"], out, "--workers", "2"),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for_checkpoint(out, "slow", proc)
        pid = json.loads((out / "slow.lock").read_text())["pid"]  # the worker fitting it
        assert pid != proc.pid
        os.kill(pid, signal.SIGKILL)
        _, err = proc.communicate(timeout=300)
    finally:
        if proc.poll() is None:
            _kill_tree(proc)
    assert proc.returncode == 0, err
    t = Table.read(out / "batch.ecsv", format="ascii.ecsv")
    assert list(t["status"]) == ["ok", "ok"]
    _same_row(t, "slow", ref)  # resumed bit for bit (teffmc.sample)
    assert "resuming" in (out / "slow" / "log.txt").read_text()
    assert not (out / "slow.partial").exists()


def test_scheduler_killed_then_rerun_resumes(stars, slow, tmp_path):
    cfg, ref = slow
    out = tmp_path / "lost"
    cluster = _Cluster(tmp_path / "c1", n_workers=1)
    cmd = _batch_cmd([stars / "alpha.toml", cfg], out, "--scheduler", cluster.address)
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for_checkpoint(out, "slow", proc)
        _kill_tree(cluster.scheduler)
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            _kill_tree(proc)
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
    again = _Cluster(tmp_path / "c2", n_workers=1, port=cluster.port)
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
    cmd = _batch_cmd([cfg], out, "--workers", "1")
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for_checkpoint(out, "slow", proc)
        proc.send_signal(signal.SIGTERM)  # a job scheduler's stop
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            _kill_tree(proc)
    assert proc.returncode == 130, err
    assert err.strip().splitlines()[-1].startswith("teffmc: interrupted") and \
        "Traceback" not in err, err
    assert (out / "slow.partial" / "chain.h5").is_file()
    assert list(Table.read(out / "batch.ecsv", format="ascii.ecsv")["status"]) == ["pending"]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    _same_row(Table.read(out / "batch.ecsv", format="ascii.ecsv"), "slow", ref)
    assert "resuming" in (out / "slow" / "log.txt").read_text()
