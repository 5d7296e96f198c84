"""Shared by the batch tests (test_batch.py, test_batch_faults.py): the INVENTED tiny
stars, `teffmc batch` as a command, and a `dask scheduler` + `dask worker` started as
subprocesses."""

import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import psutil

from small_star import small_star_config
from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.simulate import simulate_epoch


def make_stars(d):
    """alpha (converges), beta (200 steps: not converged), gamma (no data: fails)."""
    grid = load_grid("blackbody")
    for name, teff in (("alpha", 4000.0), ("beta", 3600.0)):
        truth = {"teff": teff, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 2.0}
        simulate_epoch(d, name, grid, ModelSpec(), truth, resolution=100.0,
                       wave_range=(4500.0, 9000.0), rng=np.random.default_rng(1))
    (d / "alpha.toml").write_text(small_star_config("alpha", 3000))
    (d / "beta.toml").write_text(small_star_config("beta", 200))
    (d / "gamma.toml").write_text(small_star_config("nowhere", 3000))
    return d


def batch_cmd(configs, out, *extra):
    return [sys.executable, "-m", "teffmc", "batch", *[str(c) for c in configs],
            "--out", str(out), *extra]


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def kill_tree(proc):
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


class Cluster:
    """`dask scheduler` and `dask worker` subprocesses on localhost (one BLAS thread)."""

    def __init__(self, folder, n_workers, port=None):
        self.port = port or free_port()
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
            kill_tree(p)
        for f in self.logs:
            f.close()


def same_row(t, star, ref):
    """Assert that star's row of batch table t holds the numbers of the one-row table ref."""
    row = t[list(t["star"]).index(star)]
    for col in ref.colnames:
        if col.endswith(("_median", "_p16", "_p84")) or col in ("n_steps", "status"):
            assert row[col] == ref[0][col], col


def blackbody_grid_file(path):
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
