"""Spectrum readers: formats, units, air wavelengths, validation, masks."""

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from astropy.table import Table

from teffmc.errors import DataError
from teffmc.observe import (
    TELLURIC_BANDS,
    air_to_vacuum,
    apply_masks,
    from_specutils,
    read_spectrum,
)

C_A_PER_S = 2.99792458e18  # speed of light [A/s], exact (SI definition)
FLAM = "erg / (s cm2 Angstrom)"


@pytest.fixture
def arrays():
    wave = 6000.0 + 2.0 * np.arange(600)  # exactly representable, linear WCS
    flux = 1e-13 * (1.0 + 0.2 * np.sin(wave / 37.0))
    err = 0.02 * flux
    return wave, flux, err


def _write_wcs(path, wave, flux, err, ctype="WAVE", bunit=FLAM):
    hdr = fits.Header()
    hdr.update(
        CTYPE1=ctype,
        CRVAL1=wave[0],
        CDELT1=wave[1] - wave[0],
        CRPIX1=1.0,
        CUNIT1="Angstrom",
        BUNIT=bunit,
    )
    fits.HDUList([fits.PrimaryHDU(flux, hdr), fits.ImageHDU(err, name="ERR")]).writeto(path)


def _write_csv(path, wave, flux, err):
    lines = ["# flux_unit: erg / (s cm2 Angstrom)", "wavelength [Angstrom],flux,err"]
    lines += [f"{w:.17g},{f:.17g},{e:.17g}" for w, f, e in zip(wave, flux, err)]
    path.write_text("\n".join(lines) + "\n")


def _table(wave, flux, err, flux_unit=FLAM):
    return Table(
        [wave * u.AA, flux * u.Unit(flux_unit), err * u.Unit(flux_unit)],
        names=("wavelength", "flux", "err"),
    )


def test_four_formats_read_back_identically(tmp_path, arrays):
    wave, flux, err = arrays
    _write_wcs(tmp_path / "s.fits", wave, flux, err)
    fits.BinTableHDU(_table(wave, flux, err)).writeto(tmp_path / "t.fits")
    _table(wave, flux, err).write(tmp_path / "s.ecsv", format="ascii.ecsv")
    _write_csv(tmp_path / "s.csv", wave, flux, err)
    spectra = [read_spectrum(tmp_path / n) for n in ("s.fits", "t.fits", "s.ecsv", "s.csv")]
    for spec in spectra:
        np.testing.assert_array_equal(spec.wave, wave)
        np.testing.assert_array_equal(spec.flux, flux)
        np.testing.assert_array_equal(spec.err, err)
        assert spec.mask.all()


@pytest.mark.parametrize(
    ("unit", "factor"),
    [
        ("mJy", None),  # F_nu: converted with lambda^2 / c below
        ("W m-2 um-1", 10.0),  # 1 erg/s/cm2/A = 1e-7 W / 1e-4 m2 / 1e-4 um = 10 W/m2/um
        ("W / (m2 m)", 1e7),
        ("erg / (s cm2 nm)", 10.0),
    ],
)
def test_flux_units_agree_with_flambda(tmp_path, arrays, unit, factor):
    wave, flux, err = arrays
    if factor is None:  # f_nu = f_lambda lambda^2 / c, 1 mJy = 1e-26 erg/s/cm2/Hz
        factor = wave**2 / C_A_PER_S / 1e-26
    _table(wave, flux * factor, err * factor, flux_unit=unit).write(tmp_path / "s.ecsv")
    spec = read_spectrum(tmp_path / "s.ecsv")
    np.testing.assert_allclose(spec.flux, flux, rtol=1e-12)
    np.testing.assert_allclose(spec.err, err, rtol=1e-12)


def test_plain_text_with_units_as_arguments(tmp_path, arrays):
    wave, flux, err = arrays
    text = "\n".join(
        f"{w / 10:.17g} {f * 10:.17g} {e * 10:.17g}" for w, f, e in zip(wave, flux, err)
    )
    (tmp_path / "s.txt").write_text("# no header\n" + text + "\n")
    spec = read_spectrum(tmp_path / "s.txt", wave_unit="nm", flux_unit="W m-2 um-1")
    np.testing.assert_allclose(spec.wave, wave, rtol=1e-14)
    np.testing.assert_allclose(spec.flux, flux, rtol=1e-14)


def test_air_wavelengths_from_wcs_ctype(tmp_path, arrays):
    wave, flux, err = arrays
    _write_wcs(tmp_path / "s.fits", wave, flux, err, ctype="AWAV")
    spec = read_spectrum(tmp_path / "s.fits")
    np.testing.assert_allclose(spec.wave, air_to_vacuum(wave), rtol=1e-14)
    assert 1.6 < spec.wave[0] - wave[0] < 1.8  # ~1.66 A at 6000 A (Morton 2000)
    with pytest.raises(DataError, match="contradicts") as info:
        read_spectrum(tmp_path / "s.fits", air=False)
    assert info.value.column == "medium"


def test_air_flag_for_csv(tmp_path, arrays):
    wave, flux, err = arrays
    _write_csv(tmp_path / "s.csv", wave, flux, err)
    spec = read_spectrum(tmp_path / "s.csv", air=True)
    np.testing.assert_allclose(spec.wave, air_to_vacuum(wave), rtol=1e-14)


def test_log_linear_wcs(tmp_path, arrays):
    _, flux, err = arrays
    n = flux.size
    hdr = fits.Header()
    hdr.update(
        CTYPE1="WAVE-LOG", CRVAL1=6000.0, CDELT1=0.5, CRPIX1=1.0, CUNIT1="Angstrom", BUNIT=FLAM
    )
    fits.HDUList([fits.PrimaryHDU(flux, hdr), fits.ImageHDU(err, name="ERR")]).writeto(
        tmp_path / "log.fits"
    )
    # FITS paper III (Greisen et al. 2006) eq. 5: lambda = CRVAL1 exp(CDELT1 (p - CRPIX1) / CRVAL1)
    expected = 6000.0 * np.exp(0.5 * np.arange(n) / 6000.0)
    np.testing.assert_allclose(read_spectrum(tmp_path / "log.fits").wave, expected, rtol=1e-13)
    hdr.update(CTYPE1="WAVE", CRVAL1=np.log10(6000.0), CDELT1=1e-4)
    hdr["DC-FLAG"] = 1
    fits.HDUList([fits.PrimaryHDU(flux, hdr), fits.ImageHDU(err, name="ERR")]).writeto(
        tmp_path / "log10.fits"
    )
    expected = 10 ** (np.log10(6000.0) + 1e-4 * np.arange(n))
    np.testing.assert_allclose(read_spectrum(tmp_path / "log10.fits").wave, expected, rtol=1e-13)


def test_ivar_extension_masks_zero_weight(tmp_path, arrays):
    wave, flux, err = arrays
    ivar = 1.0 / err**2
    ivar[10] = 0.0
    hdr = fits.Header()
    hdr.update(CTYPE1="WAVE", CRVAL1=wave[0], CDELT1=2.0, CUNIT1="Angstrom", BUNIT=FLAM)
    fits.HDUList([fits.PrimaryHDU(flux, hdr), fits.ImageHDU(ivar, name="IVAR")]).writeto(
        tmp_path / "s.fits"
    )
    spec = read_spectrum(tmp_path / "s.fits")
    assert not spec.mask[10] and spec.n_used == wave.size - 1
    np.testing.assert_allclose(spec.err[spec.mask], np.delete(err, 10), rtol=1e-12)


def _error_of(tmp_path, name, text, **kwargs):
    (tmp_path / name).write_text(text)
    with pytest.raises(DataError) as info:
        read_spectrum(tmp_path / name, **kwargs)
    assert "\n" not in str(info.value) and str(tmp_path / name) in str(info.value)
    return info.value


HEADER = "# flux_unit: Jy\nwave [nm],flux,err\n"


def test_not_a_flux_density_names_file_and_column(tmp_path):
    err = _error_of(tmp_path, "s.csv", "wave [nm],flux [erg / (s cm2)],err\n500,1,0.1\n501,1,0.1\n")
    assert err.column == "flux" and "flux density" in str(err)


def test_not_a_length_wave_unit(tmp_path):
    err = _error_of(tmp_path, "s.csv", HEADER.replace("[nm]", "[s]") + "500,1,0.1\n")
    assert err.column == "wave"


def test_missing_field_is_mismatched_length(tmp_path):
    err = _error_of(tmp_path, "s.csv", HEADER + "500,1,0.1\n501,2\n")
    assert "line 4" in str(err) and err.value == 2


def test_zero_error_names_column_and_value(tmp_path):
    err = _error_of(tmp_path, "s.csv", HEADER + "500,1,0.1\n501,2,0\n502,2,0.1\n")
    assert err.column == "err" and err.value == 0.0 and "row 2" in str(err)


def test_negative_error(tmp_path):
    err = _error_of(tmp_path, "s.csv", HEADER + "500,1,0.1\n501,2,-0.3\n")
    # -0.3 Jy at 5010 A in erg/s/cm2/A: -0.3e-23 c / lambda^2
    assert err.column == "err"
    assert err.value == pytest.approx(-0.3e-23 * C_A_PER_S / 5010.0**2, rel=1e-12)


def test_non_increasing_wavelengths(tmp_path):
    err = _error_of(tmp_path, "s.csv", HEADER + "500,1,0.1\n502,2,0.1\n502,2,0.1\n")
    assert err.column == "wave" and "increase" in str(err) and err.value == 5020.0


def test_every_pixel_masked(tmp_path):
    err = _error_of(tmp_path, "s.csv", HEADER + "500,nan,0.1\n501,2,inf\n")
    assert "masked" in str(err)


def test_non_finite_pixels_are_masked(tmp_path):
    (tmp_path / "s.csv").write_text(HEADER + "500,nan,0.1\n501,2,0.1\n502,2,nan\n503,2,0.1\n")
    spec = read_spectrum(tmp_path / "s.csv")
    np.testing.assert_array_equal(spec.mask, [False, True, False, True])
    assert spec.used().wave.tolist() == [5010.0, 5030.0]


def test_missing_unit_and_missing_column(tmp_path):
    err = _error_of(tmp_path, "s.csv", "wave,flux,err\n500,1,0.1\n", wave_unit="nm")
    assert err.column == "flux" and "flux_unit" in str(err)
    err = _error_of(tmp_path, "t.csv", "wave,flux\n500,1\n", wave_unit="nm", flux_unit="Jy")
    assert err.column == "err"


def test_spectrum_arrays_are_read_only(tmp_path, arrays):
    _write_csv(tmp_path / "s.csv", *arrays)
    spec = read_spectrum(tmp_path / "s.csv")
    with pytest.raises(ValueError):
        spec.flux[0] = 0.0


def test_apply_masks_telluric_and_ranges(tmp_path):
    wave = np.arange(6000.0, 10000.0, 1.0)
    flux = np.ones_like(wave)
    _table(wave, flux, 0.1 * flux).write(tmp_path / "s.ecsv")
    spec = read_spectrum(tmp_path / "s.ecsv")
    out = apply_masks(spec, ranges=[(6100.0, 6200.0)])
    in_band = np.zeros(wave.size, bool)
    for lo, hi in [*TELLURIC_BANDS, (6100.0, 6200.0)]:
        in_band |= (wave >= lo) & (wave <= hi)
    np.testing.assert_array_equal(out.mask, ~in_band)
    assert spec.mask.all()  # the input is unchanged
    assert apply_masks(spec, telluric=False).mask.all()
    with pytest.raises(DataError, match="every pixel"):
        apply_masks(spec, ranges=[(5000.0, 11000.0)])


def test_from_specutils_matches_file(tmp_path, arrays):
    specutils = pytest.importorskip("specutils")
    from astropy.nddata import InverseVariance

    wave, flux, err = arrays
    fnu_mjy = flux * wave**2 / C_A_PER_S / 1e-26
    ivar = 1.0 / (err * wave**2 / C_A_PER_S / 1e-26) ** 2
    obj = specutils.Spectrum(
        flux=fnu_mjy * u.mJy,
        spectral_axis=wave / 10 * u.nm,
        uncertainty=InverseVariance(ivar / u.mJy**2),
    )
    spec = from_specutils(obj)
    np.testing.assert_allclose(spec.wave, wave, rtol=1e-14)
    np.testing.assert_allclose(spec.flux, flux, rtol=1e-12)
    np.testing.assert_allclose(spec.err, err, rtol=1e-12)


def test_medium_comment_in_text_file(tmp_path):
    (tmp_path / "s.csv").write_text("# medium: air\n" + HEADER + "650,1,0.1\n651,1,0.1\n")
    spec = read_spectrum(tmp_path / "s.csv")
    np.testing.assert_allclose(spec.wave, air_to_vacuum([6500.0, 6510.0]), rtol=1e-14)
    assert read_spectrum(tmp_path / "s.csv", air=True).wave[0] == spec.wave[0]
    (tmp_path / "t.csv").write_text("# medium: water\n" + HEADER + "650,1,0.1\n")
    with pytest.raises(DataError, match="'air' or 'vacuum'"):
        read_spectrum(tmp_path / "t.csv")


def test_from_specutils_mask_is_inverted():
    specutils = pytest.importorskip("specutils")
    from astropy.nddata import StdDevUncertainty

    obj = specutils.Spectrum(
        flux=np.ones(4) * u.Jy,
        spectral_axis=np.array([500.0, 501.0, 502.0, 503.0]) * u.nm,
        uncertainty=StdDevUncertainty(np.full(4, 0.1)),
        mask=np.array([False, True, False, False]),
    )
    np.testing.assert_array_equal(from_specutils(obj).mask, [True, False, True, True])


# Bad-pixel masks from files. Convention (astropy NDData and data-quality arrays; common
# practice, no source): a mask/DQ value that is non-zero flags a bad pixel.
def _wcs_header(wave):
    hdr = fits.Header()
    hdr.update(CTYPE1="WAVE", CRVAL1=wave[0], CDELT1=2.0, CUNIT1="Angstrom", BUNIT=FLAM)
    return hdr


@pytest.mark.parametrize("extname", ["MASK", "DQ", "QUALITY", "BADPIX"])
def test_fits_mask_extension_flags_bad_pixels(tmp_path, arrays, extname):
    wave, flux, err = arrays
    dq = np.zeros(wave.size, np.int16)
    dq[[3, 50, 51]] = [1, 4, 512]
    fits.HDUList([fits.PrimaryHDU(flux, _wcs_header(wave)), fits.ImageHDU(err, name="ERR"),
                  fits.ImageHDU(dq, name=extname)]).writeto(tmp_path / "s.fits")
    spec = read_spectrum(tmp_path / "s.fits")
    assert np.flatnonzero(~spec.mask).tolist() == [3, 50, 51]
    np.testing.assert_array_equal(spec.flux, flux)   # masked, not removed or altered


def test_fits_mask_extension_named_by_columns_and_shape_checked(tmp_path, arrays):
    wave, flux, err = arrays
    bad = np.zeros(wave.size, np.uint8)
    bad[7] = 1
    fits.HDUList([fits.PrimaryHDU(flux, _wcs_header(wave)), fits.ImageHDU(err, name="ERR"),
                  fits.ImageHDU(bad, name="FLAGS"),
                  fits.ImageHDU(bad[:-1], name="MASK")]).writeto(tmp_path / "s.fits")
    spec = read_spectrum(tmp_path / "s.fits", columns={"mask": "FLAGS"})
    assert np.flatnonzero(~spec.mask).tolist() == [7]
    with pytest.raises(DataError, match="MASK") as info:        # default: the short MASK
        read_spectrum(tmp_path / "s.fits")
    assert "\n" not in str(info.value) and "599" in str(info.value)
    with pytest.raises(DataError, match="NOPE"):
        read_spectrum(tmp_path / "s.fits", columns={"mask": "NOPE"})


def test_table_mask_column_combines_with_use_flag(tmp_path, arrays):
    wave, flux, err = arrays
    t = _table(wave, flux, err)
    t["dq"] = np.zeros(wave.size, int)
    t["dq"][[5, 6]] = 2
    t["use"] = np.ones(wave.size, bool)
    t["use"][[6, 9]] = False
    t.write(tmp_path / "s.ecsv")
    t.write(tmp_path / "s.fits")
    for name in ("s.ecsv", "s.fits"):
        spec = read_spectrum(tmp_path / name)
        assert np.flatnonzero(~spec.mask).tolist() == [5, 6, 9], name


def test_config_columns_reach_the_reader(tmp_path, arrays):
    from teffmc.config import load_config
    from teffmc.run import _read_spectrum

    wave, flux, err = arrays
    t = Table([wave * u.AA, flux * u.Unit(FLAM), err * u.Unit(FLAM),
               np.arange(wave.size) % 97 == 0], names=("LAMBDA_VAC", "F", "SIG", "BADPIX_FLAG"))
    t.write(tmp_path / "s.ecsv")
    (tmp_path / "p.csv").write_text("band,mag,err,system\nbessell-V,5.0,0.02,vega\n")
    (tmp_path / "c.toml").write_text(
        'grid = "blackbody"\n[[epoch]]\nlabel = "a"\nphotometry = "p.csv"\n'
        '[[epoch.spectra]]\nfile = "s.ecsv"\ntelluric_mask = false\n'
        'columns = { wave = "LAMBDA_VAC", flux = "F", err = "SIG", mask = "BADPIX_FLAG" }\n')
    spec = _read_spectrum(load_config(tmp_path / "c.toml").epochs[0].spectra[0])
    assert np.flatnonzero(~spec.mask).tolist() == np.flatnonzero(t["BADPIX_FLAG"]).tolist()
    (tmp_path / "c.toml").write_text(
        (tmp_path / "c.toml").read_text().replace('mask = "BADPIX_FLAG"', 'bad = "X"'))
    with pytest.raises(Exception, match="columns.bad"):
        load_config(tmp_path / "c.toml")
