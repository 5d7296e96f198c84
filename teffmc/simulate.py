"""Simulated observations from the forward model (for the demo and for injection tests).

The spectra and photometry are written as ECSV files with units, exactly as a user
would give them, so the whole path (reading, masking, convolution, likelihood) is
exercised.
"""

from pathlib import Path

import numpy as np

__all__ = ["simulate_epoch", "simulate_survey", "DEFAULT_BANDS"]

DEFAULT_BANDS = ["bessell-B", "bessell-V", "bessell-R", "bessell-I",
                 "twomass-J", "twomass-H", "twomass-Ks"]


_SURVEY_CONFIG = """\
# INVENTED star {name} (simulated by teffmc.simulate.simulate_survey; not a real star).
# Truth: teff = {teff:.1f} K, a_v = {a_v:.3f}, theta = {theta:.3f} mas, logg = 0, mh = 0.
name = "{name} (invented)"
grid = "{grid}"
{model}[[epoch]]
photometry = "{name}_phot.ecsv"
spectra = [{{ file = "{name}_spec.ecsv", resolution = 1000.0{mismatch} }}]
[priors]
teff = {{ dist = "uniform", low = 3000, high = 4500 }}
{report}"""
# terms=False: the data are the grid's own, so its likelihood needs neither the mismatch
# term nor the grid nuisances (5 free parameters: teff, logg, mh, theta, a_v)
_NO_TERMS = {"model": "[model]\ngrid_nuisance = false\n", "mismatch": ', mismatch = "none"'}


def simulate_survey(folder, n, *, grid="builtin", seed=1, terms=True, formats=None):
    """Write ``n`` INVENTED stars (data + one config each) into ``folder``.

    Each star: Teff 3400-4200 K, A_V 0.3-1.5, theta 1-5 mas (uniform draws), log g 0,
    [M/H] 0; BVRIJHKs photometry and a 6000-7500 A spectrum at R = 1000, S/N 50, noise
    drawn. The configs give only the data and a Teff prior (defaults for the rest: 10
    free parameters with the mismatch term and the grid nuisances); the true values are
    in a comment at the top of each config. ``terms=False`` turns the mismatch term and
    the grid nuisances off (5 free parameters: right for data the grid made itself);
    ``formats`` (a list) sets ``[report] formats``. Used by ``bench/bench_batch.py`` and
    ``examples/make_survey_data.py``.

    Returns
    -------
    list of pathlib.Path
        The config files, ``star01.toml`` ...
    """
    from .config import ModelSpec
    from .photosphere import load_grid

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    g = load_grid(grid)
    rng = np.random.default_rng(seed)
    configs = []
    for k in range(n):
        name = f"star{k + 1:02d}"
        truth = {"teff": rng.uniform(3400.0, 4200.0), "logg": 0.0, "mh": 0.0,
                 "a_v": rng.uniform(0.3, 1.5), "r_v": 3.1, "theta": rng.uniform(1.0, 5.0)}
        simulate_epoch(folder, name, g, ModelSpec(), truth, wave_range=(6000.0, 7500.0),
                       resolution=1000.0, snr=50.0, rng=rng)
        path = folder / f"{name}.toml"
        extra = dict({"model": "", "mismatch": ""} if terms else _NO_TERMS)
        extra["report"] = ("" if formats is None else
                           "[report]\nformats = [" + ", ".join(f'"{f}"' for f in formats)
                           + "]\n")
        path.write_text(_SURVEY_CONFIG.format(name=name, grid=grid, **truth, **extra),
                        encoding="utf-8")
        configs.append(path)
    return configs


def _params(truth):
    return {k: np.array([float(v)]) for k, v in truth.items()}


def simulate_epoch(folder, stem, grid, model, truth, *, wave_range=(4000.0, 9500.0),
                   resolution=1000.0, snr=60.0, bands=DEFAULT_BANDS, mag_err=0.02,
                   rng=None, tilt=(0.0, 0.0), noise=True):
    """Write ``<stem>_spec.ecsv`` and ``<stem>_phot.ecsv`` into ``folder``.

    Parameters
    ----------
    grid : photosphere grid
    model : teffmc.config.ModelSpec
    truth : dict
        Parameter values (all parameters of the model, including fixed ones).
    wave_range : (float, float)
        Vacuum wavelength span [Angstrom]; sampled at 2 pixels per resolution element.
    snr : float
        Signal-to-noise ratio at the flux peak (photon-like: lower where fainter).
    mag_err : float or sequence
        Photometric errors [mag].
    tilt : (float, float)
        Linear and quadratic Legendre coefficients of a multiplicative calibration error.
    noise : bool
        Add Gaussian noise with the stated errors (False: exact model values).

    Returns
    -------
    (Path, Path)
        The spectrum and photometry files.
    """
    from astropy import units as u
    from astropy.table import Table

    from .model import SpectrumChannel, Terms, band_pixels, observed_flux
    from .observe import BandSet
    from .observe.spectrum import make_spectrum
    from .priors import Prior

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = rng if rng is not None else np.random.default_rng(0)
    p = _params(truth)
    rv = Prior("fixed", value=float(truth.get("r_v", 3.1)))
    p.setdefault("r_v", np.array([rv.value]))

    wave = np.exp(np.arange(np.log(wave_range[0]), np.log(wave_range[1]), 0.5 / resolution))
    # the fit's own route from grid to pixels (teffmc.model.SpectrumChannel)
    flat = make_spectrum(wave, np.ones_like(wave), np.ones_like(wave))
    flux = SpectrumChannel(flat, grid, model, rv, resolution=resolution).predict(p)[0]
    x = 2 * (wave - wave[0]) / (wave[-1] - wave[0]) - 1
    flux = flux * (1.0 + tilt[0] * x + tilt[1] * (1.5 * x**2 - 0.5))
    peak = flux.max()
    err = peak / snr * np.sqrt(np.clip(flux / peak, 1e-4, None)) + 0.2 * peak / snr**2
    if noise:
        flux = flux + rng.normal(0.0, err)
    unit = u.erg / u.s / u.cm**2 / u.AA
    spec = Table({"wavelength": wave * u.AA, "flux": flux * unit, "error": err * unit})
    spec.meta["comment"] = ["SIMULATED data from the teffmc forward model (not a real star)",
                            "vacuum wavelengths"]
    spec_path = folder / f"{stem}_spec.ecsv"
    spec.write(spec_path, format="ascii.ecsv", overwrite=True)

    pw = band_pixels(grid.wave, bands)
    bs = BandSet(list(bands), ["vega"] * len(bands), pw)
    mags = bs.mags(observed_flux(grid.on_pixels(pw), Terms(pw, model, rv), p))[0]
    merr = np.broadcast_to(np.asarray(mag_err, float), mags.shape)
    if noise:
        mags = mags + rng.normal(0.0, merr)
    phot = Table({"band": list(bands), "mag": mags, "err": merr,
                  "system": ["vega"] * len(bands)})
    phot.meta["comment"] = ["SIMULATED photometry from the teffmc forward model"]
    phot_path = folder / f"{stem}_phot.ecsv"
    phot.write(phot_path, format="ascii.ecsv", overwrite=True)
    return spec_path, phot_path
