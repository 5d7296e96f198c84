"""Photometry tables: magnitudes, fluxes with units, validation."""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table

from teffmc.errors import DataError
from teffmc.observe import get_filter, make_photometry, read_photometry, vega_spectrum

C_A_PER_S = 2.99792458e18  # [A/s], exact


def _write(path, text):
    path.write_text(text)
    return path


def test_read_mags_csv(tmp_path):
    p = _write(
        tmp_path / "p.csv",
        "band,mag,err,system,floor\nbessell-V,5.10,0.01,vega,0.02\ntwomass-Ks,0.50,0.03,vega,0\n",
    )
    phot = read_photometry(p)
    assert phot.bands == ("bessell-V", "twomass-Ks") and phot.system == ("vega", "vega")
    np.testing.assert_array_equal(phot.mag, [5.10, 0.50])
    np.testing.assert_allclose(phot.total_err, [np.hypot(0.01, 0.02), 0.03])


def test_flux_in_jy_gives_ab_mag(tmp_path):
    # Oke & Gunn 1983: m_AB = -2.5 log10(f_nu / 3630.78 Jy); 36.31 Jy -> 5.0 mag
    Table(
        {"band": ["sdss2010-r"], "flux": [36.31] * u.Jy, "err": [0.3631] * u.Jy, "system": ["ab"]}
    ).write(tmp_path / "p.ecsv")
    phot = read_photometry(tmp_path / "p.ecsv")
    assert phot.mag[0] == pytest.approx(5.0 - 2.5 * np.log10(3631 / 3630.78), abs=1e-4)
    assert phot.err[0] == pytest.approx(2.5 / np.log(10) * 0.01, rel=1e-9)


def test_flambda_and_fnu_flux_agree(tmp_path):
    filt = get_filter("bessell-V")
    pivot = filt.pivot_wavelength
    flam = 3.0e-12
    fnu_mjy = flam * pivot**2 / C_A_PER_S / 1e-26
    text_l = ("# flux_unit: erg / (s cm2 Angstrom)\nband,flux,err,system\n"
              f"bessell-V,{flam},{flam / 50},vega\n")
    text_n = f"band,flux [mJy],err,system\nbessell-V,{fnu_mjy!r},{fnu_mjy / 50!r},vega\n"
    a = read_photometry(_write(tmp_path / "a.csv", text_l))
    b = read_photometry(_write(tmp_path / "b.csv", text_n))
    assert a.mag[0] == pytest.approx(b.mag[0], abs=1e-10)
    # Vega system: a source with Vega's photon-weighted mean F_lambda has V = 0.03
    wave, flux = vega_spectrum()
    x = np.linspace(*filt.wave_range, 20001)
    resp = np.interp(x, filt.wave, filt.response)
    vega_mean = np.trapezoid(np.interp(x, wave, flux) * resp * x, x) / np.trapezoid(resp * x, x)
    assert a.mag[0] == pytest.approx(0.03 - 2.5 * np.log10(flam / vega_mean), abs=1e-5)


def _error(tmp_path, text, name="p.csv"):
    with pytest.raises(DataError) as info:
        read_photometry(_write(tmp_path / name, text))
    assert "\n" not in str(info.value) and name in str(info.value)
    return info.value


def test_unknown_band(tmp_path):
    err = _error(tmp_path, "band,mag,err,system\nbessel-V,5,0.1,vega\n")
    assert err.column == "band" and err.value == "bessel-V" and "bessell-V" in str(err)


@pytest.mark.parametrize("bad", ["0", "-0.1", "nan"])
def test_non_positive_error(tmp_path, bad):
    err = _error(tmp_path, f"band,mag,err,system\nbessell-V,5,0.1,vega\nbessell-B,5,{bad},vega\n")
    assert err.column == "err" and "row 2" in str(err)
    assert err.value == float(bad) or (np.isnan(err.value) and bad == "nan")


def test_non_positive_flux_error(tmp_path):
    err = _error(tmp_path, "band,flux [Jy],err,system\nbessell-V,5,0,vega\n")
    assert err.column == "err" and err.value == 0.0


def test_mismatched_row_length(tmp_path):
    err = _error(tmp_path, "band,mag,err,system\nbessell-V,5,0.1\n")
    assert "3 fields" in str(err)


def test_bad_system_and_missing_columns(tmp_path):
    assert _error(tmp_path, "band,mag,err,system\nbessell-V,5,0.1,st\n").column == "system"
    assert _error(tmp_path, "band,mag,err\nbessell-V,5,0.1\n").column == "system"
    assert _error(tmp_path, "band,err,system\nbessell-V,0.1,ab\n").column == "flux"
    err = _error(tmp_path, "band,flux,err,system\nbessell-V,5,0.1,ab\n")
    assert err.column == "flux" and "unit" in str(err)
    err = _error(tmp_path, "band,flux [erg / (s cm2)],err,system\nbessell-V,5,0.1,ab\n")
    assert "flux density" in str(err)


def test_user_filter_relative_to_table(tmp_path):
    Table(
        [[499.0, 500.0, 600.0, 601.0] * u.nm, [0.0, 1.0, 1.0, 0.0]],
        names=("wavelength", "response"),
    ).write(tmp_path / "box.ecsv")
    phot = read_photometry(_write(tmp_path / "p.csv", "band,mag,err,system\nbox.ecsv,7,0.1,ab\n"))
    assert phot.bands == (str(tmp_path / "box.ecsv"),)
    assert len(phot.bandset(np.linspace(4000.0, 7000.0, 500))) == 1


def test_make_photometry_lengths():
    with pytest.raises(DataError, match="2 values but there are 1 bands") as info:
        make_photometry(["bessell-V"], [1.0, 2.0], [0.1], "vega")
    assert info.value.column == "mag"
