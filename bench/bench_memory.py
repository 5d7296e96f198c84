"""Peak memory and posterior.nc size of a fit to a long spectrum.

Run: ``.venv/bin/python bench/bench_memory.py [--pixels 200000] [--grid builtin]
[--max-steps 400]``. Simulates an INVENTED star (teffmc.simulate) whose spectrum has
``--pixels`` pixels over 4000-9500 A (2 pixels per resolution element, so R follows from
the pixel count) plus BVRIJHKs photometry, fits it with ``teffmc fit`` in a child process
with the default settings (correlated mismatch term, 48 walkers, one BLAS thread) and a short chain,
and prints the fit process's own peak RSS (os.wait4) and the size of posterior.nc.
Memory does not grow with the chain beyond the stored draws (posterior.nc keeps at most
8000), so a short chain measures the peak of a long one. Issue acceptance: 200,000 pixels
within 2 GB peak memory.

The simulation runs in its own child process: a child forked from a large parent inherits
the parent's resident pages into its own peak (Linux keeps ru_maxrss across exec), which
would overstate the fit's peak.
"""

import argparse
import math
import os
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

TRUTH = {"teff": 3700.0, "logg": 0.0, "mh": 0.0, "a_v": 0.8, "r_v": 3.1, "theta": 3.0}


def simulate(folder, grid_name, wave, resolution):
    import numpy as np

    from teffmc.config import ModelSpec
    from teffmc.photosphere import load_grid
    from teffmc.simulate import simulate_epoch

    grid = load_grid(grid_name)
    truth = dict(TRUTH, **{f"{n}_scale": 1.0 for n in getattr(grid, "nuisance_names", ())})
    simulate_epoch(folder, "m", grid, ModelSpec(), truth, wave_range=wave,
                   resolution=resolution, snr=100.0, rng=np.random.default_rng(3))
    return 0


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pixels", type=int, default=200_000)
    ap.add_argument("--grid", default="builtin", choices=("builtin", "blackbody"))
    ap.add_argument("--max-steps", type=int, default=400)
    ap.add_argument("--walkers", type=int, default=48)
    ap.add_argument("--keep", default=None, help="folder to keep the run in")
    ap.add_argument("--simulate-into", default=None, help=argparse.SUPPRESS)
    a = ap.parse_args(argv)
    wave = (4000.0, 9500.0)
    resolution = a.pixels / 2.0 / math.log(wave[1] / wave[0])
    if a.simulate_into:
        return simulate(Path(a.simulate_into), a.grid, wave, resolution)
    tmp = Path(a.keep or tempfile.mkdtemp(prefix="teffmc-mem-"))
    tmp.mkdir(parents=True, exist_ok=True)
    subprocess.run([sys.executable, __file__, "--simulate-into", str(tmp), "--grid", a.grid,
                    "--pixels", str(a.pixels)], check=True)
    (tmp / "m.toml").write_text(textwrap.dedent(f"""\
        name = "memory bench (invented star)"
        grid = "{a.grid}"
        [[epoch]]
        photometry = "m_phot.ecsv"
        spectra = [{{ file = "m_spec.ecsv", resolution = {resolution:.1f} }}]
        [priors]
        teff = {{ dist = "uniform", low = 3300, high = 4500 }}
        logg = {{ fixed = 0.0 }}
        mh = {{ fixed = 0.0 }}
        [sampler]
        n_walkers = {a.walkers}
        min_steps = {a.max_steps}
        max_steps = {a.max_steps}
        check_every = 100
        n_starts = 2
        """))
    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1",
               MKL_NUM_THREADS="1")
    t0 = time.perf_counter()
    err_path = tmp / "fit.stderr"
    with open(err_path, "w") as err:
        proc = subprocess.Popen([sys.executable, "-m", "teffmc", "fit", str(tmp / "m.toml"),
                                 "--out", str(tmp / "run"), "--quiet", "--overwrite"],
                                env=env, stdout=subprocess.DEVNULL, stderr=err)
        # this child's own peak (RUSAGE_CHILDREN would also count the simulation's)
        _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    res = proc
    res.stderr = err_path.read_text()
    wall = time.perf_counter() - t0
    peak_kb = usage.ru_maxrss
    nc = tmp / "run" / "posterior.nc"
    print(f"pixels {a.pixels} (R {resolution:.0f}), grid {a.grid}, {a.max_steps} steps x "
          f"{a.walkers} walkers: exit {res.returncode}, wall {wall:.0f} s")
    print(f"peak RSS of the fit: {peak_kb / 2**20:.2f} GiB")
    if nc.exists():
        print(f"posterior.nc: {nc.stat().st_size / 2**20:.0f} MiB")
    if res.returncode != 0:
        print(res.stderr[-2000:])
    print(f"run folder: {tmp}")
    return res.returncode


if __name__ == "__main__":
    sys.exit(main())
