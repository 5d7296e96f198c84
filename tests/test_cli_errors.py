"""Bad input: exit status 2 and one line naming the file, key or column and the value."""

import textwrap

import numpy as np
import pytest

from teffmc.cli import main

SPEC = """\
# %ECSV 1.0
# ---
# datatype:
# - {{name: wavelength, unit: Angstrom, datatype: float64}}
# - {{name: flux, unit: erg / (Angstrom s cm2), datatype: float64}}
# - {{name: error, unit: erg / (Angstrom s cm2), datatype: float64}}
# schema: astropy-2.0
wavelength flux error
{rows}
"""


def _spec_rows(wave, err=1e-12, flux=1e-10):
    return "\n".join(f"{w} {flux} {e}" for w, e in zip(wave, np.broadcast_to(err, len(wave))))


def _write_case(tmp_path, *, wave=None, err=1e-12, config_extra="", teff_prior="3000, 5000",
                data_file="spec.ecsv"):
    wave = np.linspace(5000.0, 8000.0, 40) if wave is None else wave
    (tmp_path / "spec.ecsv").write_text(SPEC.format(rows=_spec_rows(wave, err)))
    low, high = teff_prior.split(",")
    cfg = textwrap.dedent(f"""\
        grid = "blackbody"
        {config_extra}
        [[epoch]]
        spectra = [{{ file = "{data_file}" }}]
        [priors]
        teff = {{ dist = "uniform", low = {low}, high = {high} }}
        [sampler]
        max_steps = 200
        """)
    path = tmp_path / "star.toml"
    path.write_text(cfg)
    return path


def _run(capsys, path, tmp_path):
    rc = main(["fit", str(path), "--out", str(tmp_path / "run"), "--quiet"])
    err = capsys.readouterr().err.strip()
    return rc, err


def _assert_one_line_exit2(rc, err, *needles, tmp_path):
    assert rc == 2
    assert len(err.splitlines()) == 1, err
    assert "Traceback" not in err
    for n in needles:
        assert n in err, (n, err)
    assert not (tmp_path / "run").exists() and not (tmp_path / "run.partial").exists()


def test_missing_data_file(tmp_path, capsys):
    path = _write_case(tmp_path, data_file="nowhere.ecsv")
    rc, err = _run(capsys, path, tmp_path)
    _assert_one_line_exit2(rc, err, "star.toml", "epoch[0].spectra[0].file", "nowhere.ecsv",
                           tmp_path=tmp_path)


def test_unknown_config_key(tmp_path, capsys):
    path = _write_case(tmp_path, config_extra="colour = 3")
    rc, err = _run(capsys, path, tmp_path)
    _assert_one_line_exit2(rc, err, "star.toml", "colour", tmp_path=tmp_path)


def test_negative_error_bar(tmp_path, capsys):
    err_col = np.full(40, 1e-12)
    err_col[7] = -2e-12
    path = _write_case(tmp_path, err=err_col)
    rc, err = _run(capsys, path, tmp_path)
    _assert_one_line_exit2(rc, err, "spec.ecsv", "error", "-2e-12", tmp_path=tmp_path)


def test_wavelengths_not_increasing(tmp_path, capsys):
    wave = np.linspace(5000.0, 8000.0, 40)
    wave[[10, 11]] = wave[[11, 10]]
    path = _write_case(tmp_path, wave=wave)
    rc, err = _run(capsys, path, tmp_path)
    _assert_one_line_exit2(rc, err, "spec.ecsv", "wavelength", tmp_path=tmp_path)


def test_teff_prior_outside_grid(tmp_path, capsys):
    path = _write_case(tmp_path, teff_prior="500, 5000")
    rc, err = _run(capsys, path, tmp_path)
    _assert_one_line_exit2(rc, err, "star.toml", "priors.teff", "500", tmp_path=tmp_path)


@pytest.mark.parametrize("body, needle", [
    ("grid = 3\n[[epoch]]\nphotometry='x'", "grid"),
    ('[sampler]\nn_walkers = -4\n[[epoch]]\nphotometry="x"', "n_walkers"),
    ("not toml [", "not valid TOML"),
])
def test_other_config_errors(tmp_path, capsys, body, needle):
    path = tmp_path / "bad.toml"
    path.write_text(body)
    (tmp_path / "x").write_text("")
    rc, err = _run(capsys, path, tmp_path)
    _assert_one_line_exit2(rc, err, "bad.toml", needle, tmp_path=tmp_path)


def test_not_converged_is_one_plain_warning_line(tmp_path, capsys):
    # a run stopped at max_steps says so in one line on stderr (no Python source line)
    import warnings

    from teffmc.cli import _one_line_warnings
    from teffmc.errors import ConvergenceWarning

    with warnings.catch_warnings():
        warnings.simplefilter("always")
        warnings.showwarning = _one_line_warnings
        warnings.warn("not converged at max_steps = 200: tau\n 27", ConvergenceWarning,
                      stacklevel=1)
    err = capsys.readouterr().err
    assert err == "teffmc: warning: not converged at max_steps = 200: tau 27\n"
