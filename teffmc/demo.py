"""The demo: an INVENTED red supergiant, its simulated data, and a full analysis.

"Ficta" is not a real star. Two epochs are simulated with teffmc's own forward
model plus noise: a "bright" epoch, and a "faint" one in which the star has cooled a
little AND a fresh veil of large dust grains covers part of its disc. Two hypotheses
are fitted jointly to both epochs — cooling alone versus cooling plus a dust veil —
and compared; the dimming budget says how much of the fade the cooling explains.
"""

import shutil
import sys
from pathlib import Path

import numpy as np

__all__ = ["TRUTH", "make_demo_data", "run_demo"]

#: True parameters of the invented star, per epoch (not a real star).
TRUTH = {
    "bright": {"teff": 3650.0, "logg": 0.0, "mh": 0.0, "a_v": 0.9, "r_v": 3.1, "theta": 12.0,
               "veil_tau": 0.0, "veil_cover": 1.0, "grain_radius": 1.0},
    "faint": {"teff": 3600.0, "logg": 0.0, "mh": 0.0, "a_v": 0.9, "r_v": 3.1, "theta": 12.0,
              "veil_tau": 0.7, "veil_cover": 1.0, "grain_radius": 1.0},
}
DISTANCE_PC = 700.0
SEED = 20261202

CONFIG = """\
# teffmc demo: the INVENTED red supergiant "Ficta" (not a real star).
# Its data were simulated by teffmc's forward model; the true values are in truth.toml.
name = "Ficta (invented demo star)"
grid = "{grid}"
shared = ["logg", "mh", "a_v", "r_v", "theta", "grain_radius", "mismatch_amp", "mismatch_scale", "mismatch_white", "tio_scale", "haze_scale"]
distance_pc = {{ dist = "normal", mean = 700.0, sd = 70.0 }}

[model]
extinction_law = "CCM89"
grain_material = "silicate"
grain_spread_dex = 0.1

# Two competing explanations of the fade, fitted to the same data and compared.
[[hypothesis]]
name = "veil"
veil = "mie"

[[hypothesis]]
name = "cooling"
veil = "none"

# The invented spectra carry a flux-calibration error up to quadratic order
# (Legendre coefficients 0.02, -0.01): calibration_order = 2 absorbs it.
[[epoch]]
label = "bright"
photometry = "bright_phot.ecsv"
spectra = [{{ file = "bright_spec.ecsv", resolution = 1000.0, calibration_order = 2, calibration_sigma = 0.05 }}]

[[epoch]]
label = "faint"
photometry = "faint_phot.ecsv"
spectra = [{{ file = "faint_spec.ecsv", resolution = 1000.0, calibration_order = 2, calibration_sigma = 0.05 }}]

[priors]
teff = {{ dist = "uniform", low = {tlo}, high = {thi} }}
logg = {{ fixed = 0.0 }}
mh = {{ fixed = 0.0 }}
a_v = {{ dist = "uniform", low = 0.0, high = 4.0 }}
theta = {{ dist = "loguniform", low = 1.0, high = 100.0 }}
# The veil is fresh: none at the bright epoch. At the faint epoch it covers the whole
# disc (for nearly grey grains only cover x (1 - exp(-tau)) would be measurable).
"veil_tau@bright" = {{ fixed = 0.0 }}
"veil_tau@faint" = {{ dist = "uniform", low = 0.0, high = 3.0 }}
veil_cover = {{ fixed = 1.0 }}
grain_radius = {{ dist = "loguniform", low = 0.05, high = 3.0 }}

[sampler]
n_walkers = 32
max_steps = 25000
min_steps = 1000
check_every = 250
seed = 7
# evidence = true adds a nested-sampling ln Z to the comparison (slower)
"""


def _grid_choice():
    from .photosphere import builtin_grid_path

    return "builtin" if builtin_grid_path().exists() else "blackbody"


def make_demo_data(folder, *, grid_name=None, seed=SEED):
    """Write the invented star's data, config (``ficta.toml``) and truth into ``folder``."""
    from .config import ModelSpec
    from .photosphere import load_grid
    from .simulate import simulate_epoch

    folder = Path(folder)
    grid_name = grid_name or _grid_choice()
    grid = load_grid(grid_name)
    rng = np.random.default_rng(seed)
    model = ModelSpec(veil="mie", grain_material="silicate", grain_spread_dex=0.1)
    for label, truth in TRUTH.items():
        simulate_epoch(folder, label, grid, model, truth, rng=rng, snr=60.0,
                       mag_err=[0.03, 0.02, 0.02, 0.02, 0.03, 0.03, 0.03],
                       tilt=(0.02, -0.01))
    tlo, thi = (3000.0, 4500.0) if grid_name != "blackbody" else (2600.0, 6000.0)
    cfg = folder / "ficta.toml"
    cfg.write_text(CONFIG.format(grid=grid_name, tlo=tlo, thi=thi), encoding="utf-8")
    lines = ["# True values of the INVENTED demo star Ficta (not a real star)",
             f"distance_pc = {DISTANCE_PC!r}"]
    for label, truth in TRUTH.items():
        lines.append(f"\n[{label}]")
        lines += [f"{k} = {v!r}" for k, v in truth.items()]
    (folder / "truth.toml").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return cfg


def run_demo(out, *, quiet=False):
    """``teffmc demo``: simulate the invented star into ``out/data`` and analyse it.

    ``out`` holds the data (``out/data``), the run of the first hypothesis (the
    veil), ``out/hypotheses/`` the other runs and ``out/compare.*`` the comparison.
    """
    from .compare import compare_runs
    from .config import load_config
    from .run import fit_one, summary_to_text
    from .runfolder import check_out_folder

    out = Path(out).resolve()
    if out.exists() and (out / "data" / "ficta.toml").exists():
        shutil.rmtree(out)  # an earlier demo
    check_out_folder(out)
    if out.exists():
        shutil.rmtree(out)
    cfg_path = make_demo_data(out / "data")
    if not quiet:
        print(f"demo data for the invented star Ficta written to {out / 'data'}", file=sys.stderr)
    cfg = load_config(cfg_path)
    variants = cfg.variants()
    models = [v.model for _, v in variants]
    dirs, results = [], {}
    for i, (name, v) in enumerate(variants):
        d = out / "hypotheses" / name
        if not quiet:
            print(f"== hypothesis {name}", file=sys.stderr)
        results[name] = fit_one(v, d, quiet=quiet, other_models=models, hypothesis=name)
        if i == 0:  # the first hypothesis's run is also the demo's top-level run
            for f in d.iterdir():
                shutil.move(str(f), str(out / f.name))
            d.rmdir()
            d = results[name].out = out
        dirs.append(d)
    comp = compare_runs(dirs, out, fitted=results.values())
    for name, res in results.items():
        print(f"\n== hypothesis {name}\n{summary_to_text(res.summary)}")
    print("\n" + comp.text)
    print("\ntrue values (invented): " + "; ".join(
        f"{lab}: " + ", ".join(f"{k}={v:g}" for k, v in t.items()) for lab, t in TRUTH.items()))
    print(f"run folder: {out}")
    return 0
