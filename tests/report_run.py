"""A small, fast run folder for the report tests (Planck grid file, short chains).

Two epochs of an invented star simulated with a small grid file of Planck spectra (so the
run records a real SHA-256 grid checksum) (a 100 K cooling and a
fresh veil of 1 um grains at the faint epoch), fitted under two hypotheses (cooling +
veil; cooling alone) and compared: every figure of the report has something to draw
(masked range, photometry, budget per hypothesis, Delta Teff, Pareto k). Not the demo:
the demo takes minutes, this about a minute.
"""

import warnings

import numpy as np

from teffmc.config import ModelSpec
from teffmc.errors import ConvergenceWarning
from teffmc.photosphere import load_grid
from teffmc.photosphere.blackbody import planck_surface_flux
from teffmc.photosphere.grid import Grid
from teffmc.run import fit
from teffmc.simulate import simulate_epoch

__all__ = ["make_report_run", "CONFIG"]

BASE = {"logg": 0.0, "mh": 0.0, "a_v": 0.6, "r_v": 3.1, "theta": 3.0, "veil_cover": 1.0,
        "grain_radius": 1.0}
TRUTH = {"bright": {**BASE, "teff": 4400.0, "veil_tau": 0.0},
         "faint": {**BASE, "teff": 4300.0, "veil_tau": 0.5}}

CONFIG = """\
name = "Testa (invented test star)"
grid = "planck.h5"
shared = ["logg", "mh", "a_v", "r_v", "theta", "grain_radius"]
distance_pc = { dist = "normal", mean = 500.0, sd = 50.0 }
[[hypothesis]]
name = "veil"
veil = "mie"
[[hypothesis]]
name = "cooling"
veil = "none"
[[epoch]]
label = "bright"
photometry = "bright_phot.ecsv"
spectra = [{ file = "bright_spec.ecsv", resolution = 300.0, mismatch = "none", mask = [[6800.0, 7000.0]] }]
[[epoch]]
label = "faint"
photometry = "faint_phot.ecsv"
spectra = [{ file = "faint_spec.ecsv", resolution = 300.0, mismatch = "none", mask = [[6800.0, 7000.0]] }]
[priors]
teff = { dist = "uniform", low = 3000, high = 6000 }
logg = { fixed = 0.0 }
mh = { fixed = 0.0 }
a_v = { dist = "uniform", low = 0.0, high = 3.0 }
theta = { dist = "loguniform", low = 0.5, high = 30.0 }
"veil_tau@bright" = { fixed = 0.0 }
"veil_tau@faint" = { dist = "uniform", low = 0.0, high = 3.0 }
veil_cover = { fixed = 1.0 }
grain_radius = { dist = "loguniform", low = 0.1, high = 3.0 }
[sampler]
n_walkers = 20
max_steps = MAX_STEPS
check_every = 250
seed = 3
"""


def planck_grid(path):
    """A grid file of Planck surface fluxes, 3000-6000 K every 100 K (log g and [M/H]
    have no effect), 0.3-3 um at lambda/dlambda = 2000; returns the loaded grid."""
    teff = np.arange(3000.0, 6001.0, 100.0)
    wave = np.geomspace(3000.0, 30000.0, int(np.log(10.0) * 2000))
    lf = np.log10(planck_surface_flux(wave, teff))
    cube = np.broadcast_to(lf[:, None, None, :], (teff.size, 2, 2, wave.size)).copy()
    Grid(teff, np.array([-1.0, 1.0]), np.array([-1.0, 0.5]), wave, cube,
         provenance={"source": "Planck's law, computed (a test grid)",
                     "approximate": "yes: no lines or bands, for tests only"},
         name="planck-test").write(path)
    return load_grid(str(path))


def make_report_run(folder, max_steps=4000):
    """Simulate the data into ``folder`` and fit them into ``folder/run``; return the
    :class:`teffmc.run.FitResult` of the best hypothesis (``.comparison`` set)."""
    grid = planck_grid(folder / "planck.h5")
    rng = np.random.default_rng(11)
    model = ModelSpec(veil="mie", grain_spread_dex=0.1)
    for label, truth in TRUTH.items():
        simulate_epoch(folder, label, grid, model, truth, wave_range=(4000.0, 9000.0),
                       resolution=300.0, snr=80.0, rng=rng)
    cfg = folder / "testa.toml"
    cfg.write_text(CONFIG.replace("MAX_STEPS", str(max_steps)), encoding="utf-8")
    with warnings.catch_warnings():
        # a short chain may stop unconverged: the report must say so, not fail
        warnings.simplefilter("ignore", ConvergenceWarning)
        return fit(cfg, folder / "run", quiet=True)
