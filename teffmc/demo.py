"""The demo: an INVENTED cool supergiant, its simulated data, and a full fit.

"Ficta" is not a real star. Its "true" values below are chosen to look like a
typical red supergiant; the data are made with teffmc's own forward model plus
noise, so the fit can be checked against known answers.
"""

import sys
from pathlib import Path

import numpy as np

__all__ = ["TRUTH", "make_demo_data", "run_demo", "DEMO_CONFIG"]

#: True parameters of the invented star (not a real star).
TRUTH = {"teff": 3650.0, "logg": 0.0, "mh": 0.0, "a_v": 0.9, "r_v": 3.1, "theta": 12.0}
DISTANCE_PC = 700.0
SEED = 20261202

DEMO_CONFIG = """\
# teffmc demo: the INVENTED red supergiant "Ficta" (not a real star).
# Its data were simulated by teffmc's forward model; true values are in truth.toml.
name = "Ficta (invented demo star)"
grid = "{grid}"

[model]
extinction_law = "CCM89"
veil = "none"

[[epoch]]
label = "obs"
photometry = "ficta_phot.ecsv"
spectra = [{{ file = "ficta_spec.ecsv", resolution = 1000.0, calibration_order = 2, calibration_sigma = 0.1 }}]

[priors]
teff = {{ dist = "uniform", low = {tlo}, high = {thi} }}
logg = {{ fixed = 0.0 }}
mh = {{ fixed = 0.0 }}
a_v = {{ dist = "uniform", low = 0.0, high = 5.0 }}
theta = {{ dist = "loguniform", low = 1.0, high = 100.0 }}

distance_pc = {{ dist = "normal", mean = 700.0, sd = 70.0 }}

[sampler]
n_walkers = 32
max_steps = 6000
min_steps = 1000
check_every = 250
seed = 7
"""

PHOT_BANDS = ["bessell-B", "bessell-V", "bessell-R", "bessell-I",
              "twomass-J", "twomass-H", "twomass-Ks"]
PHOT_ERR = [0.03, 0.02, 0.02, 0.02, 0.03, 0.03, 0.03]


def _grid_choice():
    from .photosphere import builtin_grid_path

    return "builtin" if builtin_grid_path().exists() else "blackbody"


def make_demo_data(folder, *, grid_name=None, seed=SEED):
    """Write the invented star's spectrum, photometry, config and truth into ``folder``.

    Returns the config path.
    """
    from astropy import units as u
    from astropy.table import Table

    from .config import ModelSpec
    from .model import Dust, observed_flux
    from .observe import BandSet
    from .photosphere import load_grid
    from .priors import Prior

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    grid_name = grid_name or _grid_choice()
    grid = load_grid(grid_name)
    rng = np.random.default_rng(seed)
    p = {k: np.array([v]) for k, v in TRUTH.items()}
    model = ModelSpec()
    rv = Prior("fixed", value=TRUTH["r_v"])

    # Spectrum: 0.40-0.95 um, R = 1000, sampled at 2 pixels per resolution element.
    wave = np.exp(np.arange(np.log(4000.0), np.log(9500.0), 1.0 / 2000.0))
    flux = observed_flux(grid.on_pixels(wave, resolution=1000.0), Dust(wave, model, rv), p)[0]
    # A smooth flux-calibration error of a few per cent (invented), then photon-like
    # noise: S/N 60 at the flux peak, lower where the star is faint.
    x = 2 * (wave - wave[0]) / (wave[-1] - wave[0]) - 1
    flux = flux * (1.0 + 0.04 * x - 0.02 * (1.5 * x**2 - 0.5))
    err = flux.max() / 60.0 * np.sqrt(flux / flux.max()) + 0.002 * flux.max()
    flux = flux + rng.normal(0.0, err)
    unit = u.erg / u.s / u.cm**2 / u.AA
    spec = Table({"wavelength": wave * u.AA, "flux": flux * unit, "error": err * unit})
    spec.meta["comment"] = ["INVENTED demo data for a star that does not exist (teffmc demo)",
                            "vacuum wavelengths"]
    spec.write(folder / "ficta_spec.ecsv", format="ascii.ecsv", overwrite=True)

    lo, hi = BandSet.wavelength_span(PHOT_BANDS)
    sel = (grid.wave >= lo - 50) & (grid.wave <= hi + 50)
    pw = grid.wave[sel]
    bands = BandSet(PHOT_BANDS, ["vega"] * len(PHOT_BANDS), pw)
    mags = bands.mags(observed_flux(grid.on_pixels(pw), Dust(pw, model, rv), p))[0]
    mags = mags + rng.normal(0.0, PHOT_ERR)
    phot = Table({"band": PHOT_BANDS, "mag": np.round(mags, 4), "err": PHOT_ERR,
                  "system": ["vega"] * len(PHOT_BANDS)})
    phot.meta["comment"] = ["INVENTED demo photometry for a star that does not exist"]
    phot.write(folder / "ficta_phot.ecsv", format="ascii.ecsv", overwrite=True)

    tlo, thi = (3000.0, 4500.0) if grid_name != "blackbody" else (2500.0, 6000.0)
    cfg = folder / "ficta.toml"
    cfg.write_text(DEMO_CONFIG.format(grid=grid_name, tlo=tlo, thi=thi), encoding="utf-8")
    truth = "\n".join(f"{k} = {v!r}" for k, v in TRUTH.items())
    (folder / "truth.toml").write_text(
        "# True values of the INVENTED demo star Ficta (not a real star)\n"
        f"{truth}\ndistance_pc = {DISTANCE_PC!r}\n", encoding="utf-8")
    return cfg


def run_demo(out, *, quiet=False):
    """``teffmc demo``: write the invented data into ``out`` and fit them."""
    from .run import fit, summary_to_text

    import shutil

    out = Path(out)
    staging = out.with_name(out.name + ".data")
    if staging.exists():
        shutil.rmtree(staging)
    cfg = make_demo_data(staging)
    if not quiet:
        print(f"demo data for the invented star Ficta written to {staging}", file=sys.stderr)
    res = fit(cfg, out, quiet=quiet)
    shutil.move(str(staging), str(out / "data"))
    print(summary_to_text(res.summary))
    print("true values (invented): " + ", ".join(f"{k}={v:g}" for k, v in TRUTH.items()))
    print(f"run folder: {res.out}")
    return 0
