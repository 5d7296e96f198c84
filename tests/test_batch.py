"""Survey mode: `teffmc batch` / teffmc.fit_many on tiny stars, some of them broken, on an
embedded Dask LocalCluster and on a separately started `dask scheduler` + `dask worker`.

Tiny stars: the blackbody grid, data made by that grid (mismatch = "none"), 2 free
parameters; a fit takes a few seconds. The fault tests are in test_batch_faults.py."""

import json
import os
import subprocess
import sys

import numpy as np
import psutil
import pytest
from astropy.table import Table

import teffmc
from batch_helpers import Cluster, batch_cmd, free_port, make_stars
from teffmc import batch
from teffmc.cli import main

STARS = ("alpha", "beta", "gamma")
STATUS = {"alpha": "ok", "beta": "not_converged", "gamma": "failed"}


@pytest.fixture(scope="module")
def stars(tmp_path_factory):
    return make_stars(tmp_path_factory.mktemp("stars"))


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
    addr = f"tcp://127.0.0.1:{free_port()}"  # nobody listens there
    rc = main(["batch", str(stars / "alpha.toml"), "--out", str(tmp_path / "o"),
               "--scheduler", addr])
    err = capsys.readouterr().err.strip()
    assert rc == 1 and len(err.splitlines()) == 1, err
    assert err.startswith("teffmc: error: cannot reach the Dask scheduler at " + addr), err
    assert not (tmp_path / "o" / "alpha").exists()


# ------------------------------------------------------ a separately started Dask cluster

@pytest.fixture(scope="module")
def dask_cluster(tmp_path_factory):
    c = Cluster(tmp_path_factory.mktemp("cluster"), n_workers=2)
    yield c
    c.close()


def test_attached_cluster_gives_the_same_table(first, stars, dask_cluster):
    _, out1 = first
    out = stars.parent / "batch_attached"
    res = subprocess.run(batch_cmd([stars / f"{s}.toml" for s in STARS], out,
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
