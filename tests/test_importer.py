"""`teffmc grid import`: model spectra in many formats and units back into a Grid."""

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from astropy.table import Table

from teffmc.errors import DataError, GridError, OffGridError
from teffmc.observe.airvac import air_to_vacuum, vacuum_to_air
from teffmc.photosphere import Grid, load_grid
from teffmc.photosphere.importer import import_grid, rebin_flux_conserving

# Speed of light [Angstrom/s]: exact by the SI definition of the metre.
C_AA = 2.99792458e18

TEFF = np.array([3000.0, 3500.0, 4000.0])
LOGG = np.array([0.0, 1.0])
MH = np.array([-0.5, 0.0])
WAVE = np.linspace(5000.0, 6000.0, 201)  # vacuum Angstrom, linear so a FITS WCS holds it


def _true_grid():
    """Smooth invented log fluxes (no physics), float32 as in a grid file."""
    T, G, M, W = np.meshgrid(TEFF, LOGG, MH, WAVE, indexing="ij")
    lf = 6.0 + 0.4 * (T / 1000.0) - 0.05 * G + 0.1 * M + 0.2 * np.sin(W / 37.0) * (T / 4000.0)
    return Grid(TEFF, LOGG, MH, WAVE, lf.astype(np.float32), name="truth")


# ---------------------------------------------------------------- writers (one per format)
def _fits_table_flam(path, wave, flam, air):
    cols = [fits.Column(name="wavelength", format="D", unit="Angstrom", array=wave),
            fits.Column(name="flux", format="D", unit="erg/(s cm2 Angstrom)", array=flam)]
    hdu = fits.BinTableHDU.from_columns(cols)
    hdu.header["MEDIUM"] = "air" if air else "vacuum"
    hdu.writeto(path)


def _fits_table_fnu_jy(path, wave, flam, air):
    # F_nu = F_lambda lambda^2 / c (definition, F_lambda dlambda = F_nu dnu, with the
    # vacuum wavelength since nu = c / lambda_vac); 1 Jy = 1e-23 erg/s/cm2/Hz
    vac = air_to_vacuum(wave) if air else wave
    fnu_jy = flam * vac**2 / C_AA / 1e-23
    wave_um = wave / 1e4
    cols = [fits.Column(name="WAVE", format="D", unit="um", array=wave_um),
            fits.Column(name="FNU", format="D", unit="Jy", array=fnu_jy)]
    fits.BinTableHDU.from_columns(cols).writeto(path)  # no MEDIUM: the row says


def _fits_wcs_image(path, wave, flam, air):
    hdu = fits.PrimaryHDU(flam)
    hdu.header["CTYPE1"] = "WAVE"  # vacuum; a linear WCS cannot hold a linear vacuum axis in air
    hdu.header["CRVAL1"] = wave[0]
    hdu.header["CDELT1"] = wave[1] - wave[0]
    hdu.header["CRPIX1"] = 1.0
    hdu.header["CUNIT1"] = "Angstrom"
    hdu.header["BUNIT"] = "erg/(s cm2 Angstrom)"
    hdu.writeto(path)


def _ecsv_per_micron_nm(path, wave, flam, air):
    t = Table()
    t["wavelength"] = wave / 10.0 * u.nm
    t["flux"] = flam * 1e4 * 1e-7 * 1e4 * u.W / u.m**2 / u.um  # erg/s/cm2/A -> W/m2/um
    t.meta["medium"] = "air" if air else "vacuum"
    t.write(path, format="ascii.ecsv")


def _csv_text(path, wave, flam, air):
    lines = [f"# medium: {'air' if air else 'vacuum'}",
             "wavelength [Angstrom],flux [erg/s/cm2/Angstrom]"]
    lines += [f"{float(w)!r},{float(f)!r}" for w, f in zip(wave, flam)]
    path.write_text("\n".join(lines) + "\n")


WRITERS = [(".fits", _fits_table_flam), (".fits", _fits_table_fnu_jy), (".fits", _fits_wcs_image),
           (".ecsv", _ecsv_per_micron_nm), (".csv", _csv_text)]


def _write_folder(folder, grid, skip=(), extra_rows=None):
    """Write every node of ``grid`` as a model file; air wavelengths on every other table."""
    folder.mkdir(exist_ok=True)
    rows = ["file,teff,logg,mh,air"]
    k = 0
    for idx in np.ndindex(grid.log_flux.shape[:3]):
        if idx in skip:
            continue
        ext, writer = WRITERS[k % len(WRITERS)]
        air = writer is not _fits_wcs_image and k % 2 == 1
        flam = 10.0 ** grid.log_flux[idx].astype(float)
        wave = vacuum_to_air(grid.wave) if air else grid.wave
        name = f"m{k:02d}{ext}"
        writer(folder / name, wave, flam, air)
        t, g, m = grid.node_params(idx)
        rows.append(f"{name},{t:g},{g:g},{m:g},{'true' if air else 'false'}")
        k += 1
    rows += extra_rows or []
    (folder / "params.csv").write_text("\n".join(rows) + "\n")
    return folder / "params.csv"


# ---------------------------------------------------------------- round trip
def test_round_trip_all_formats_units_and_air(tmp_path):
    truth = _true_grid()
    table = _write_folder(tmp_path / "models", truth)
    g = import_grid(tmp_path / "models", table)
    for ax in ("teff", "logg", "mh"):
        np.testing.assert_array_equal(getattr(g, ax), getattr(truth, ax))
    # Every file maps back onto one vacuum axis (air -> vacuum by Morton 2000, ApJS 130,
    # 403, eq. 8, the observe package's formula), which is kept, not resampled.
    np.testing.assert_allclose(g.wave, truth.wave, rtol=1e-12, atol=0)
    assert "kept exactly" in g.provenance["wave_axis"]
    np.testing.assert_allclose(g.log_flux, truth.log_flux, rtol=0, atol=1e-6)
    assert g.log_flux.dtype == np.float32
    assert g.holes == [] and g.provenance["holes"] == "0"
    assert g.provenance["n_models"] == "12"
    assert "5 of 12 files converted" in g.provenance["air_to_vacuum"]
    assert "Jy" in g.provenance["flux_units"] and "nm -> Angstrom" in g.provenance["wave_units"]
    # exact at the nodes, and survives the grid file
    g.write(tmp_path / "g.h5")
    g2 = load_grid(tmp_path / "g.h5")
    assert g2.checksum == g.checksum
    tt, gg, mm = np.meshgrid(g.teff, g.logg, g.mh, indexing="ij")
    got = g2.interpolate_log(tt.ravel(), gg.ravel(), mm.ravel())
    np.testing.assert_array_equal(got, g.log_flux.reshape(-1, g.wave.size).astype(float))


def test_air_files_hold_air_wavelengths_and_come_back_in_vacuum(tmp_path):
    # Morton 2000 (ApJS 130, 403, eq. 8): n - 1 ~ 2.78e-4 near 5500 A, so air wavelengths
    # are ~1.5 A shorter; the importer must undo that, not treat it as a different axis.
    truth = _true_grid()
    folder = tmp_path / "m"
    folder.mkdir()
    flam = 10.0 ** truth.log_flux[0, 0, 0].astype(float)
    _csv_text(folder / "a.csv", vacuum_to_air(WAVE), flam, air=False)  # file says vacuum...
    (folder / "a.csv").write_text((folder / "a.csv").read_text().replace("# medium: vacuum\n", ""))
    _csv_text(folder / "b.csv", WAVE, flam * 1.1, air=False)
    (folder / "t.csv").write_text("file,teff,logg,mh\na.csv,3000,0,0\nb.csv,3500,0,0\n")
    # ...and no medium stated: air=False leaves a.csv 1.5 A off, so the axes differ
    g_vac = import_grid(folder, folder / "t.csv", air=False)
    assert "log-uniform" in g_vac.provenance["wave_axis"]
    # with the per-row column saying a.csv is in air, the shared vacuum axis is recovered
    (folder / "t.csv").write_text("file,teff,logg,mh,air\na.csv,3000,0,0,yes\nb.csv,3500,0,0,\n")
    g = import_grid(folder, folder / "t.csv")
    assert np.min(WAVE - vacuum_to_air(WAVE)) > 1.0
    np.testing.assert_allclose(g.wave, WAVE, rtol=0, atol=1e-8)
    np.testing.assert_allclose(g.log_flux[0, 0, 0], truth.log_flux[0, 0, 0], atol=1e-6)


def test_fnu_in_jy_converted_by_definition(tmp_path):
    # F_lambda = F_nu c / lambda^2 (definition of flux densities); 1 Jy = 1e-23 erg/s/cm2/Hz
    folder = tmp_path / "m"
    folder.mkdir()
    lines = ["wave,fnu"] + [f"{float(w)!r},2.5" for w in WAVE]
    (folder / "flat.txt").write_text("\n".join(lines) + "\n")
    (folder / "t.csv").write_text("file,teff,logg,mh\nflat.txt,3000,0,0\n")
    g = import_grid(folder, folder / "t.csv", wave_unit="Angstrom", flux_unit="Jy")
    want = np.log10(2.5e-23 * C_AA / WAVE**2)
    np.testing.assert_allclose(g.log_flux[0, 0, 0], want, atol=1e-6)


def test_headerless_text_descending_and_units_from_the_table(tmp_path):
    folder = tmp_path / "m"
    folder.mkdir()
    flam = 1e6 * (WAVE / 5000.0) ** -2
    text = "\n".join(f"{float(w / 1e4)!r} {float(f * 1e-3)!r}"
                     for w, f in zip(WAVE[::-1], flam[::-1]))
    (folder / "x.dat").write_text(text + "\n")  # micron, W/m2/um... written descending
    (folder / "t.csv").write_text("file,teff,logg,mh,wave_unit,flux_unit\n"
                                  "x.dat,3000,0,0,um,W m-2 um-1\n")
    g = import_grid(folder, folder / "t.csv")
    np.testing.assert_allclose(g.wave, WAVE, rtol=1e-12)
    # 1 W m-2 um-1 = 1e7 erg/s / 1e4 cm2 / 1e4 A = 0.1 erg/s/cm2/A (SI prefixes)
    np.testing.assert_allclose(g.log_flux[0, 0, 0], np.log10(flam * 1e-3 * 0.1), atol=1e-6)


# ---------------------------------------------------------------- different samplings
def test_different_samplings_go_to_the_finest_log_uniform_overlap(tmp_path):
    folder = tmp_path / "m"
    folder.mkdir()
    fine = np.geomspace(4800.0, 6000.0, 3001)
    coarse = np.linspace(5000.0, 6500.0, 301)
    def smooth(w):
        return 1e6 * (w / 5500.0) ** -3  # invented shape
    _csv_text(folder / "fine.csv", fine, smooth(fine), air=False)
    _csv_text(folder / "coarse.csv", coarse, 2 * smooth(coarse), air=False)
    (folder / "t.csv").write_text("file,teff,logg,mh\nfine.csv,3000,0,0\ncoarse.csv,3500,0,0\n")
    g = import_grid(folder, folder / "t.csv")
    assert g.wave[0] == 5000.0 and g.wave[-1] == 6000.0
    step = np.diff(np.log(g.wave))
    np.testing.assert_allclose(step, step[0], rtol=1e-8)
    assert step[0] <= np.log(fine[1] / fine[0]) < 1.001 * step[0]
    np.testing.assert_allclose(10 ** g.log_flux[0, 0, 0], smooth(g.wave), rtol=1e-5)
    np.testing.assert_allclose(10 ** g.log_flux[1, 0, 0], 2 * smooth(g.wave), rtol=1e-5)


def test_rebinning_conserves_flux_of_a_narrow_line():
    # The integral of the piecewise-linear input over the output's extent is kept
    # (flux conservation; common practice, no source).
    x = np.linspace(5000.0, 6000.0, 20001)
    y = 1.0 - 0.9 * np.exp(-0.5 * ((x - 5500.3) / 0.4) ** 2)
    out = np.linspace(5010.0, 5990.0, 99)
    rebinned = rebin_flux_conserving(x, y, out)
    edges = np.concatenate([[out[0] - 5.0], 0.5 * (out[1:] + out[:-1]), [out[-1] + 5.0]])
    sel = (x >= edges[0]) & (x <= edges[-1])
    want = np.trapezoid(y[sel], x[sel])
    np.testing.assert_allclose(np.sum(rebinned * np.diff(edges)), want, rtol=1e-9)


def test_given_wave_must_be_covered(tmp_path):
    table = _write_folder(tmp_path / "m", _true_grid())
    g = import_grid(tmp_path / "m", table, wave=np.linspace(5100.0, 5900.0, 50), name="sub")
    assert g.wave.size == 50 and g.name == "sub"
    with pytest.raises(GridError, match="covers 5000-6000 A but wave= needs 4000"):
        import_grid(tmp_path / "m", table, wave=np.linspace(4000.0, 5900.0, 50))


# ---------------------------------------------------------------- holes and bounds
def test_hole_is_reported_and_never_crossed(tmp_path):
    truth = _true_grid()
    table = _write_folder(tmp_path / "m", truth, skip=[(1, 0, 0)])
    g = import_grid(tmp_path / "m", table)
    assert g.holes == [(3500.0, 0.0, -0.5)]
    assert g.provenance["holes"] == "1: teff=3500 logg=0 mh=-0.5"
    assert np.all(np.isnan(g.log_flux[1, 0, 0]))
    with pytest.raises(OffGridError):
        g.interpolate_log(3200.0, 0.5, -0.25)  # the cell touches the hole
    # a node and a cell away from the hole still work (exactly at the node)
    np.testing.assert_array_equal(g.interpolate_log(4000.0, 1.0, 0.0)[0],
                                  g.log_flux[2, 1, 1].astype(float))
    assert np.all(np.isfinite(g.interpolate_log(3500.0, 0.5, 0.0)))  # face away from it


def test_off_grid_error_carries_point_and_bounds(tmp_path):
    g = import_grid(tmp_path / "m", _write_folder(tmp_path / "m", _true_grid()))
    with pytest.raises(OffGridError) as e:
        g.interpolate_log([3500.0, 4100.0], 0.5, -0.2)
    assert e.value.point["teff"] == 4100.0
    assert e.value.bounds == {"teff": (3000.0, 4000.0), "logg": (0.0, 1.0), "mh": (-0.5, 0.0)}


# ---------------------------------------------------------------- bad input
def test_duplicate_rows_name_both_files(tmp_path):
    table = _write_folder(tmp_path / "m", _true_grid(), extra_rows=["m03.fits,3000,0,-0.5,"])
    with pytest.raises(GridError, match=r"rows 1 and 13 both have teff=3000 logg=0 mh=-0.5 "
                                        r"\(m00.fits, m03.fits\)"):
        import_grid(tmp_path / "m", table)


def test_non_positive_flux_names_file_and_value(tmp_path):
    folder = tmp_path / "m"
    folder.mkdir()
    flam = np.ones(WAVE.size)
    flam[7] = -2.0
    _csv_text(folder / "neg.csv", WAVE, flam, air=False)
    (folder / "t.csv").write_text("file,teff,logg,mh\nneg.csv,3000,0,0\n")
    with pytest.raises(GridError, match=r"neg.csv: column flux: flux should be finite and > 0 "
                                        r"but got -2 at 5035 A"):
        import_grid(folder, folder / "t.csv")


def test_unreadable_and_missing_files(tmp_path):
    folder = tmp_path / "m"
    folder.mkdir()
    (folder / "junk.fits").write_bytes(b"this is not FITS")
    (folder / "t.csv").write_text("file,teff,logg,mh\njunk.fits,3000,0,0\n")
    with pytest.raises(DataError, match=r"junk.fits"):
        import_grid(folder, folder / "t.csv")
    (folder / "t.csv").write_text("file,teff,logg,mh\nnothere.csv,3000,0,0\n")
    with pytest.raises(GridError, match=r"row 1: model file .*nothere.csv not found"):
        import_grid(folder, folder / "t.csv")


def test_missing_column_and_bad_values_in_the_table(tmp_path):
    table = _write_folder(tmp_path / "m", _true_grid())
    (tmp_path / "m" / "t2.csv").write_text("file,teff,mh\nm00.fits,3000,0\n")
    with pytest.raises(GridError, match=r"t2.csv: no column 'logg'"):
        import_grid(tmp_path / "m", "t2.csv")  # found inside the folder
    (tmp_path / "m" / "t3.csv").write_text("file,teff,logg,mh\nm00.fits,hot,0,0\n")
    with pytest.raises(DataError, match=r"t3.csv:teff: row 1: should be a number but got 'hot'"):
        import_grid(tmp_path / "m", tmp_path / "m" / "t3.csv")
    assert table.exists()


def test_units_missing_or_contradicted(tmp_path):
    folder = tmp_path / "m"
    folder.mkdir()
    (folder / "x.csv").write_text("wave,flux\n5000,1\n5001,1\n")
    (folder / "t.csv").write_text("file,teff,logg,mh\nx.csv,3000,0,0\n")
    with pytest.raises(GridError, match=r"x.csv: no wave unit in the file"):
        import_grid(folder, folder / "t.csv")
    _csv_text(folder / "y.csv", WAVE, np.ones(WAVE.size), air=False)
    (folder / "t.csv").write_text("file,teff,logg,mh,wave_unit\ny.csv,3000,0,0,nm\n")
    with pytest.raises(GridError, match=r"y.csv: the table says wave_unit='nm' but the file says"):
        import_grid(folder, folder / "t.csv")


def test_ecsv_parameter_table(tmp_path):
    _write_folder(tmp_path / "m", _true_grid())
    rows = Table.read(tmp_path / "m" / "params.csv", format="ascii.csv")
    rows["teff"].unit = u.K
    rows.write(tmp_path / "params.ecsv", format="ascii.ecsv")
    g = import_grid(tmp_path / "m", tmp_path / "params.ecsv")
    assert g.log_flux.shape == (3, 2, 2, WAVE.size)
    assert g.provenance["table"].endswith("params.ecsv")
