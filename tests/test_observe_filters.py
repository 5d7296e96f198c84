"""Filters, zero points and synthetic magnitudes."""

import hashlib
from importlib import resources

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table

from teffmc.errors import DataError
from teffmc.observe import BandSet, get_filter, synth_mag, vega_spectrum

BANDS = [
    "bessell-U",
    "bessell-B",
    "bessell-V",
    "bessell-R",
    "bessell-I",
    "twomass-J",
    "twomass-H",
    "twomass-Ks",
    "sdss2010-r",
    "gaiadr2-G",
    "gaiadr3-BP",
    "wise2010-W1",
]
C_A_PER_S = 2.99792458e18  # [A/s], exact


def test_vega_file_is_the_documented_one():
    path = resources.files("teffmc") / "data" / "vega" / "alpha_lyr_stis_011.fits"
    provenance = (resources.files("teffmc") / "data" / "vega" / "PROVENANCE.txt").read_text()
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    assert digest in provenance


def test_vega_flux_at_5557A():
    # Bohlin 2014, AJ 147, 127: 3.44e-9 erg/s/cm2/A at 5557.5 A, +-0.5 %
    wave, flux = vega_spectrum()
    assert np.interp(5557.5, wave, flux) == pytest.approx(3.44e-9, rel=0.01)


def test_vega_v_in_both_systems():
    wave, flux = vega_spectrum()
    # Vega system definition (Bohlin & Gilliland 2004: V = 0.026 +- 0.008, rounded to 0.03);
    # on a resampled 2 A grid it is no longer an identity.
    grid = np.arange(3000.0, 12000.0, 2.0)
    assert synth_mag(grid, np.interp(grid, wave, flux), "bessell-V") == pytest.approx(
        0.03, abs=0.002
    )
    # V_AB(Vega) = +0.006 photon-counting (computed, speclite bessell-V;
    # docs/references.md#sun-and-vega)
    assert synth_mag(wave, flux, "bessell-V", "ab") == pytest.approx(0.006, abs=0.01)


@pytest.mark.parametrize("band", BANDS)
def test_flat_fnu_3631jy_is_ab_zero(band):
    # Oke & Gunn 1983: m_AB = -2.5 log10 f_nu - 48.60; 3631 Jy -> -6.6e-5 mag
    wave = np.geomspace(1000.0, 6.0e4, 40000)
    flam = (3631 * u.Jy).to_value(
        u.erg / u.s / u.cm**2 / u.AA, equivalencies=u.spectral_density(wave * u.AA)
    )
    assert synth_mag(wave, flam, band, "ab") == pytest.approx(0.0, abs=0.001)


@pytest.mark.parametrize("band", BANDS)
def test_ab_mags_agree_with_speclite(band):
    import speclite.filters

    wave, flux = vega_spectrum()
    sel = (wave > 2000) & (wave < 60000)
    unit = u.erg / u.s / u.cm**2 / u.AA
    expected = speclite.filters.load_filter(band).get_ab_magnitude(
        flux[sel] * unit, wave[sel] * u.AA
    )
    # speclite's own quadrature differs from an exact integral by up to 0.0011 mag
    # (bessell-R; measured against the dense sum in the next test), hence 2e-3.
    assert synth_mag(wave[sel], flux[sel], band, "ab") == pytest.approx(expected, abs=2e-3)


@pytest.mark.parametrize("band", BANDS)
def test_ab_mags_agree_with_dense_quadrature(band):
    # brute force: both curves linearly interpolated onto a 0.05 A grid, trapezoid rule
    wave, flux = vega_spectrum()
    filt = get_filter(band)
    lo, hi = filt.wave_range
    x = np.arange(lo, hi + 0.05, 0.05)
    resp = np.interp(x, filt.wave, filt.response, left=0.0, right=0.0)
    ab = 10 ** (-0.4 * 48.6) * C_A_PER_S / x**2
    num = np.trapezoid(np.interp(x, wave, flux) * resp * x, x)
    expected = -2.5 * np.log10(num / np.trapezoid(ab * resp * x, x))
    assert synth_mag(wave, flux, band, "ab") == pytest.approx(expected, abs=2e-5)


def test_blackbody_v_change_3650_to_3600():
    # fixed-radius blackbody 3650 K -> 3600 K fades Bessell V by +0.107 mag
    # (computed, speclite; docs/references.md#photometric-systems-and-filters)
    wave = np.linspace(4000.0, 8000.0, 4001)
    hc_k = 1.438776877e8  # h c / k_B [A K], CODATA 2018 (exact constants)
    bb = 1.0 / wave**5 / np.expm1(hc_k / (wave * np.array([[3650.0], [3600.0]])))
    mags = synth_mag(wave, bb, "bessell-V")
    assert mags[1] - mags[0] == pytest.approx(0.107, abs=0.001)


def test_bandset_matches_synth_mag_and_batches():
    rng = np.random.default_rng(3)
    wave = np.linspace(3000.0, 26000.0, 3000)
    flux = 1e-12 * (wave / 1e4) ** rng.uniform(-4, 1, size=(48, 1))
    bands = ["bessell-B", "bessell-V", "twomass-Ks"]
    bs = BandSet(bands, ["vega", "ab", "vega"], wave)
    mags = bs.mags(flux)
    assert mags.shape == (48, 3)
    np.testing.assert_allclose(mags[:, 1], synth_mag(wave, flux, "bessell-V", "ab"), atol=1e-12)
    np.testing.assert_allclose(mags, -2.5 * np.log10(flux @ bs.W.T) + bs.zp, atol=1e-12)
    # flux form: band fluxes of the magnitudes give back the band fluxes of the spectra
    np.testing.assert_allclose(bs.mag_to_band_flux(mags), bs.band_flux(flux), rtol=1e-12)


def test_coarse_grid_close_to_fine_grid():
    fine = np.arange(3000.0, 11000.0, 1.0)
    coarse = np.arange(3000.0, 11000.0, 25.0)
    smooth = 1e-12 * (fine / 5000) ** -3
    m_fine = synth_mag(fine, smooth, "bessell-B")
    m_coarse = synth_mag(coarse, 1e-12 * (coarse / 5000) ** -3, "bessell-B")
    assert m_coarse == pytest.approx(m_fine, abs=2e-4)


def test_grid_must_cover_band():
    wave = np.linspace(4000.0, 7000.0, 100)
    with pytest.raises(DataError, match="bessell-U needs") as info:
        BandSet(["bessell-V", "bessell-U"], "vega", wave)
    assert info.value.value == "bessell-U"


def test_unknown_band_lists_close_names():
    with pytest.raises(DataError, match="close names: .*bessell-V") as info:
        get_filter("besell-V", file="phot.csv")
    assert info.value.file == "phot.csv" and info.value.column == "band"
    assert info.value.value == "besell-V"


def test_unknown_system():
    with pytest.raises(DataError, match="'vega' or 'ab'"):
        BandSet(["bessell-V"], ["st"], np.linspace(4000.0, 8000.0, 100))


def test_user_filter_curve(tmp_path):
    # a top-hat 5000-6000 A (in nm in the file); its AB mag of f_nu = 3631 Jy is 0
    wave = np.array([499.0, 500.0, 600.0, 601.0]) * u.nm
    Table([wave, [0.0, 1.0, 1.0, 0.0]], names=("wavelength", "response")).write(
        tmp_path / "box.ecsv"
    )
    filt = get_filter(str(tmp_path / "box.ecsv"))
    assert filt.name == "box" and filt.wave_range == (4990.0, 6010.0)
    grid = np.linspace(4000.0, 7000.0, 3001)
    flam = 10 ** (-0.4 * 48.6) * C_A_PER_S / grid**2
    assert synth_mag(grid, flam, filt, "ab") == pytest.approx(0.0, abs=1e-9)
    # photon-counting mean of F_lambda = 1 over a top-hat is 1
    bs = BandSet([filt], "ab", grid)
    assert bs.band_flux(np.ones_like(grid))[0] == pytest.approx(1.0, rel=1e-12)


def test_user_filter_errors(tmp_path):
    Table([[1.0, 2.0], [0.0, -1.0]], names=("wavelength", "response")).write(tmp_path / "a.ecsv")
    with pytest.raises(DataError, match="no unit"):
        get_filter(str(tmp_path / "a.ecsv"))
    Table([[1.0, 2.0] * u.um, [0.5, -1.0]], names=("wavelength", "response")).write(
        tmp_path / "b.ecsv"
    )
    with pytest.raises(DataError, match="response should be") as info:
        get_filter(str(tmp_path / "b.ecsv"))
    assert info.value.column == "response" and info.value.value == -1.0
