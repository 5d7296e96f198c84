"""One spectrum in four file formats gives identical log-likelihoods (issue: observations)."""

import textwrap

import numpy as np
from astropy import units as u
from astropy.io import fits
from astropy.table import Table

from teffmc.run import prepare

C_A = 2.99792458e18  # speed of light [Angstrom/s], exact


def _write_all(tmp, wave, flam, err):
    unit = u.erg / u.s / u.cm**2 / u.AA
    t = Table({"wavelength": wave * u.AA, "flux": flam * unit, "error": err * unit})
    t.write(tmp / "s.ecsv", format="ascii.ecsv")
    fits.BinTableHDU(t).writeto(tmp / "s_table.fits")
    hdr = fits.Header({"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRPIX1": 1.0,
                       "CRVAL1": wave[0], "CDELT1": wave[1] - wave[0],
                       "BUNIT": "erg / (s cm2 Angstrom)"})
    fits.HDUList([fits.PrimaryHDU(flam, header=hdr),
                  fits.ImageHDU(err, header=fits.Header({"EXTNAME": "ERR",
                                                         "BUNIT": "erg / (s cm2 Angstrom)"}))]
                 ).writeto(tmp / "s_wcs.fits")
    with open(tmp / "s.csv", "w") as f:
        flux_unit = "[erg / (s cm2 Angstrom)]"
        f.write(f"wavelength [Angstrom],flux {flux_unit},error {flux_unit}\n")
        for row in zip(wave, flam, err):
            f.write(",".join(repr(float(v)) for v in row) + "\n")
    # the same spectrum as F_nu in Jy: F_nu = F_lambda lambda^2 / c
    fnu = flam * wave**2 / C_A / 1e-23
    enu = err * wave**2 / C_A / 1e-23
    Table({"wavelength": wave * u.AA, "flux": fnu * u.Jy, "error": enu * u.Jy}).write(
        tmp / "s_fnu.ecsv", format="ascii.ecsv")


def test_same_loglike_from_every_format(tmp_path):
    rng = np.random.default_rng(4)
    wave = np.linspace(5000.0, 8000.0, 300)
    flam = 1e-12 * (1 + 0.1 * np.sin(wave / 300.0)) + rng.normal(0, 1e-14, wave.size)
    err = np.full(wave.size, 1e-14)
    _write_all(tmp_path, wave, flam, err)
    values = {}
    for name in ("s.ecsv", "s_table.fits", "s_wcs.fits", "s.csv", "s_fnu.ecsv"):
        (tmp_path / "c.toml").write_text(textwrap.dedent(f"""\
            grid = "blackbody"
            [[epoch]]
            spectra = [{{ file = "{name}", telluric_mask = false, mismatch = "none" }}]
            [priors]
            logg = {{ fixed = 0.0 }}
            mh = {{ fixed = 0.0 }}
            """))
        prep = prepare(tmp_path / "c.toml", log=lambda m: None)
        x = np.array([[4500.0, 0.2, 1.0]])  # teff, theta, a_v
        values[name] = prep.log_post(x)[0]
    ref = values["s.ecsv"]
    assert np.isfinite(ref)
    for name in ("s_table.fits", "s.csv"):
        assert values[name] == ref, (name, values)
    # the WCS axis is computed (CRVAL1 + i CDELT1): equal to rounding of that arithmetic
    assert abs(values["s_wcs.fits"] - ref) < 1e-12 * abs(ref)
    # F_nu in Jy: equal up to floating-point rounding of the unit conversion
    assert abs(values["s_fnu.ecsv"] - ref) < 1e-6 * abs(ref)
