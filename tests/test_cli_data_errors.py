"""Bad observation files through the command line: exit 2, one line naming file and column."""

import textwrap

import numpy as np
import pytest

from teffmc.cli import main

HEADER = """\
# %ECSV 1.0
# ---
# datatype:
# - {{name: wavelength, unit: {wunit}, datatype: float64}}
# - {{name: flux, unit: {funit}, datatype: float64}}
# - {{name: error, unit: {funit}, datatype: float64}}
# schema: astropy-2.0
wavelength flux error
"""
FLAM = "erg / (Angstrom s cm2)"


def _spec(path, wave, flux, err, wunit="Angstrom", funit=FLAM):
    rows = "\n".join(f"{w} {f} {e}" for w, f, e in zip(wave, flux, err))
    path.write_text(HEADER.format(wunit=wunit, funit=funit) + rows + "\n")


def _phot(path, bands=("bessell-V",), mag=(5.0,), err=(0.02,)):
    rows = "\n".join(f"{b},{m},{e},vega" for b, m, e in zip(bands, mag, err))
    path.write_text("band,mag,err,system\n" + rows + "\n")


def _run(tmp_path, capsys, *, spec=True, phot=False, extra=""):
    epoch = []
    if spec:
        epoch.append(f'spectra = [{{ file = "s.ecsv" {extra} }}]')
    if phot:
        epoch.append('photometry = "p.csv"')
    (tmp_path / "c.toml").write_text(textwrap.dedent("""\
        grid = "builtin"
        [[epoch]]
        """) + "\n".join(epoch) + "\n")
    rc = main(["fit", str(tmp_path / "c.toml"), "--out", str(tmp_path / "run"), "--quiet"])
    err = capsys.readouterr().err.strip()
    assert rc == 2, err
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    assert not (tmp_path / "run.partial").exists()
    return err


WAVE = np.linspace(5000.0, 8000.0, 60)


def test_mismatched_column_lengths(tmp_path, capsys):
    text = HEADER.format(wunit="Angstrom", funit=FLAM) + "5000 1e-10 1e-12\n5100 1e-10\n"
    (tmp_path / "s.ecsv").write_text(text)
    err = _run(tmp_path, capsys)
    assert "s.ecsv" in err


@pytest.mark.parametrize("bad", [0.0, -1e-12])
def test_zero_or_negative_error(tmp_path, capsys, bad):
    e = np.full(60, 1e-12)
    e[5] = bad
    _spec(tmp_path / "s.ecsv", WAVE, np.full(60, 1e-10), e)
    err = _run(tmp_path, capsys)
    assert "s.ecsv" in err and "error" in err and f"got {bad:g}" in err


def test_every_pixel_masked(tmp_path, capsys):
    _spec(tmp_path / "s.ecsv", WAVE, np.full(60, 1e-10), np.full(60, 1e-12))
    err = _run(tmp_path, capsys, extra=", mask = [[4000.0, 9000.0]]")
    assert "s.ecsv" in err and "mask" in err


def test_unknown_band_lists_close_names(tmp_path, capsys):
    _phot(tmp_path / "p.csv", bands=("besel-V",))
    err = _run(tmp_path, capsys, spec=False, phot=True)
    assert "p.csv" in err and "band" in err and "bessell-V" in err


def test_wavelengths_outside_the_grid(tmp_path, capsys):
    wave = np.linspace(1000.0, 2000.0, 60)  # the built-in grid starts at 3000 A
    _spec(tmp_path / "s.ecsv", wave, np.full(60, 1e-10), np.full(60, 1e-12))
    err = _run(tmp_path, capsys)
    assert "s.ecsv" in err and "wavelength" in err and "1000" in err


def test_unit_that_is_not_a_flux_density(tmp_path, capsys):
    _spec(tmp_path / "s.ecsv", WAVE, np.full(60, 1.0), np.full(60, 0.1), funit="km")
    err = _run(tmp_path, capsys)
    assert "s.ecsv" in err and "flux" in err and "km" in err


def test_wave_range_cuts_pixels_off_the_grid(tmp_path):
    from teffmc.run import prepare

    wave = np.linspace(2000.0, 8000.0, 200)
    _spec(tmp_path / "s.ecsv", wave, np.full(200, 1e-10), np.full(200, 1e-12))
    (tmp_path / "c.toml").write_text(
        '[[epoch]]\nspectra = [{ file = "s.ecsv", wave_range = [4000.0, 8000.0] }]\n')
    prep = prepare(tmp_path / "c.toml", log=lambda m: None)
    assert prep.channels["obs"][0].wave.min() >= 4000.0
