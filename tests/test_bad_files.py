"""Damaged or odd files given as config, photometry, spectrum or filter curve (issue 13's
list of inputs that once ended in a traceback): through ``teffmc fit``, each exits 2 with
one line naming the file, and leaves no run folder, OUT.partial or lock file behind.
"""

import textwrap

import numpy as np
import pytest
from astropy.io import fits
from astropy.table import Table

from teffmc.cli import main
from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 4000.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 2.0}


@pytest.fixture(scope="module")
def good(tmp_path_factory):
    """Valid files to damage: spectrum (ECSV, FITS image), photometry (ECSV, CSV)."""
    d = tmp_path_factory.mktemp("good")
    simulate_epoch(d, "s", load_grid("blackbody"), ModelSpec(), TRUTH, resolution=300.0,
                   wave_range=(5000.0, 8000.0), rng=np.random.default_rng(5))
    t = Table.read(d / "s_spec.ecsv", format="ascii.ecsv")
    wave, flux, err = (np.asarray(t[c], float) for c in t.colnames[:3])
    hdu = fits.PrimaryHDU(flux)
    hdu.header.update(CRVAL1=wave[0], CDELT1=wave[1] - wave[0], CRPIX1=1.0,
                      CUNIT1="Angstrom", CTYPE1="WAVE", BUNIT="erg / (s cm2 Angstrom)")
    fits.HDUList([hdu, fits.ImageHDU(err, name="ERR")]).writeto(d / "s_spec.fits")
    (d / "p.csv").write_text("band,mag,err,system\nbessell-V,6.0,0.02,vega\n"
                             "bessell-B,7.1,0.02,vega\ntwomass-J,3.9,0.03,vega\n")
    return d


def _fit(capsys, tmp_path, config, *needles):
    out = tmp_path / "run"
    rc = main(["fit", str(config), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err.strip()
    assert rc == 2, err
    assert len(err.splitlines()) == 1 and "Traceback" not in err, err
    for n in needles:
        assert n in err, err
    assert not out.exists() and not (tmp_path / "run.partial").exists()
    assert not (tmp_path / "run.lock").exists()
    return err


def _config(tmp_path, *, spectrum=None, photometry=None):
    epoch = []
    if spectrum:
        epoch.append(f'spectra = [{{ file = "{spectrum}", resolution = 300.0 }}]')
    if photometry:
        epoch.append(f'photometry = "{photometry}"')
    path = tmp_path / "c.toml"
    path.write_text('grid = "blackbody"\n[[epoch]]\n' + "\n".join(epoch) + "\n")
    return path


# ------------------------------------------------------------------------ configs

def test_config_is_a_folder(tmp_path, capsys):
    (tmp_path / "cfg.toml").mkdir()
    _fit(capsys, tmp_path, tmp_path / "cfg.toml", "cfg.toml")


@pytest.mark.parametrize(("text", "needle"), [
    (b"", "epoch"),                                       # empty: no epoch
    (b"# only a comment\n", "epoch"),
    (b'grid = "blackbody"\nname = "\xff\xfe"\n', "not valid TOML"),   # not UTF-8
    (b'grid = "blackbody"\n[[epoch]]\nphotometry = "p.csv"\n[sampler]\nseed = 1.5\n',
     "seed"),
])
def test_odd_config_files(good, tmp_path, capsys, text, needle):
    (tmp_path / "p.csv").write_text((good / "p.csv").read_text())
    (tmp_path / "c.toml").write_bytes(text)
    _fit(capsys, tmp_path, tmp_path / "c.toml", "c.toml", needle)


# --------------------------------------------------------------------- photometry

PHOT_CASES = {
    "empty": (".csv", b""),
    "header_only": (".csv", b"band,mag,err,system\n"),
    "text_in_mag": (".csv", b"band,mag,err,system\nbessell-V,bright,0.02,vega\n"),
    "not_utf8": (".csv", b"band,mag,err,system\nbessell-V,6.0,0.02,vega\xff\n"),
    "missing_column": (".csv", b"band,mag,system\nbessell-V,6.0,vega\n"),
    "ecsv_no_rows": (".ecsv", b"# %ECSV 1.0\n# ---\n# datatype:\n# - {name: band, datatype: "
                              b"string}\n# - {name: mag, datatype: float64}\n# - {name: err, "
                              b"datatype: float64}\n# - {name: system, datatype: string}\n"
                              b"band mag err system\n"),
    "ecsv_truncated_header": (".ecsv", b"# %ECSV 1.0\n# ---\n# datatype:\n# - {name: band, da"),
    "ecsv_short_row": (".ecsv", b"# %ECSV 1.0\n# ---\n# datatype:\n# - {name: band, datatype: "
                                b"string}\n# - {name: mag, datatype: float64}\n# - {name: err, "
                                b"datatype: float64}\n# - {name: system, datatype: string}\n"
                                b"band mag err system\nbessell-V 6.0 0.02\n"),
    "nan_error": (".csv", b"band,mag,err,system\nbessell-V,6.0,nan,vega\n"),
    "empty_filter_curve": (".csv", b"band,mag,err,system\nmyband.ecsv,6.0,0.02,vega\n"),
}


@pytest.mark.parametrize("case", sorted(PHOT_CASES))
def test_bad_photometry_files(tmp_path, capsys, case):
    suffix, data = PHOT_CASES[case]
    (tmp_path / f"p{suffix}").write_bytes(data)
    (tmp_path / "myband.ecsv").write_text("")  # the filter curve of empty_filter_curve
    _fit(capsys, tmp_path, _config(tmp_path, photometry=f"p{suffix}"), "p")


def test_photometry_is_a_folder(tmp_path, capsys):
    (tmp_path / "p.csv").mkdir()
    _fit(capsys, tmp_path, _config(tmp_path, photometry="p.csv"), "p.csv")


# ----------------------------------------------------------------------- spectra

def _damaged_fits(good, how):
    data = (good / "s_spec.fits").read_bytes()
    if how == "truncated":
        return data[: len(data) - 3000]
    if how == "header_only":
        return data[:2880]
    head = data[:2880].decode("ascii")
    if how == "cdelt_zero":
        card = next(c for c in (head[i:i + 80] for i in range(0, 2880, 80))
                    if c.startswith("CDELT1"))
        head = head.replace(card, "CDELT1  = 0".ljust(80))
    elif how == "cdelt_text":
        card = next(c for c in (head[i:i + 80] for i in range(0, 2880, 80))
                    if c.startswith("CDELT1"))
        head = head.replace(card, "CDELT1  = 'wide'".ljust(80))
    elif how == "cunit_bad":
        card = next(c for c in (head[i:i + 80] for i in range(0, 2880, 80))
                    if c.startswith("CUNIT1"))
        head = head.replace(card, "CUNIT1  = 'parsecs per fortnight'".ljust(80))
    return head.encode("ascii") + data[2880:]


@pytest.mark.parametrize("how", ["truncated", "header_only", "cdelt_zero", "cdelt_text",
                                 "cunit_bad"])
def test_damaged_fits_spectrum(good, tmp_path, capsys, how):
    (tmp_path / "s.fits").write_bytes(_damaged_fits(good, how))
    _fit(capsys, tmp_path, _config(tmp_path, spectrum="s.fits"), "s.fits")


def test_the_undamaged_fits_spectrum_is_read(good):
    from teffmc.observe import read_spectrum

    s = read_spectrum(good / "s_spec.fits")
    assert s.wave.size == len(Table.read(good / "s_spec.ecsv", format="ascii.ecsv"))


SPEC_CASES = {
    "empty": ("s.txt", b""),
    "header_only": ("s.txt", b"# wavelength [Angstrom] flux [erg / (s cm2 Angstrom)] err\n"),
    "not_utf8": ("s.txt", b"wave flux err\n5000 1\xff 0.1\n"),
    "ecsv_truncated_mid_row": None,  # filled from the good file below
    "ecsv_no_rows": None,
    "one_pixel": None,
}


@pytest.mark.parametrize("case", sorted(SPEC_CASES))
def test_bad_spectrum_files(good, tmp_path, capsys, case):
    text = (good / "s_spec.ecsv").read_bytes()
    head, _, rows = text.partition(b"\nwavelength ")
    header_line, _, rows = rows.partition(b"\n")
    header = head + b"\nwavelength " + header_line + b"\n"
    name, data = SPEC_CASES[case] or ("s.ecsv", {
        "ecsv_truncated_mid_row": text[: len(text) // 2].rsplit(b" ", 1)[0],
        "ecsv_no_rows": header,
        "one_pixel": header + rows.split(b"\n")[0] + b"\n",
    }[case])
    (tmp_path / name).write_bytes(data)
    _fit(capsys, tmp_path, _config(tmp_path, spectrum=name), name)


def test_spectrum_is_a_folder(tmp_path, capsys):
    (tmp_path / "s.ecsv").mkdir()
    _fit(capsys, tmp_path, _config(tmp_path, spectrum="s.ecsv"), "s.ecsv")


def test_config_names_the_run_folder_as_a_file(good, tmp_path, capsys):
    (tmp_path / "p.csv").write_text((good / "p.csv").read_text())
    (tmp_path / "run").write_text("not a folder")
    rc = main(["fit", str(_config(tmp_path, photometry="p.csv")), "--out",
               str(tmp_path / "run"), "--quiet"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1 and "is not a folder" in err
    assert textwrap.dedent(err) == err
