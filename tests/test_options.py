"""Config options wired through the model: RV, Student-t, interpolation error, parallax."""

import textwrap

import numpy as np
import pytest

from teffmc.config import ModelSpec
from teffmc.errors import ConfigError
from teffmc.photosphere import load_grid
from teffmc.run import prepare
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 3700.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 4.0}


def _case(tmp, *, grid="builtin", spec_extra="", model_extra="", top_extra=""):
    if not (tmp / "o_spec.ecsv").exists():
        simulate_epoch(tmp, "o", load_grid("builtin"), ModelSpec(), TRUTH,
                       wave_range=(5000.0, 8000.0), resolution=500.0, noise=False)
    (tmp / "o.toml").write_text(textwrap.dedent(f"""\
        grid = "{grid}"
        {top_extra}
        [model]
        grid_nuisance = false
        {model_extra}
        [[epoch]]
        photometry = "o_phot.ecsv"
        spectra = [{{ file = "o_spec.ecsv", resolution = 500.0, mismatch = "none" {spec_extra} }}]
        [priors]
        logg = {{ fixed = 0.0 }}
        mh = {{ fixed = 0.0 }}
        """))
    return prepare(tmp / "o.toml", log=lambda m: None)


def _x(prep):
    return np.array([[TRUTH[n] for n in prep.space.names]])


def test_radial_velocity_moves_the_data_to_the_rest_frame(tmp_path):
    # Doppler shift, first order: lambda_obs = lambda_rest (1 + v/c), c = 299792.458 km/s
    base = _case(tmp_path)
    moved = _case(tmp_path, spec_extra=", rv_kms = 150.0")
    w0, w1 = base.channels["obs"][0].wave, moved.channels["obs"][0].wave
    np.testing.assert_allclose(w1, w0 / (1 + 150.0 / 299792.458), rtol=1e-12)
    # the data were made at rest, so declaring a velocity makes the fit worse
    assert moved.log_post(_x(moved))[0] < base.log_post(_x(base))[0]


def test_student_t_likelihood_and_its_guard(tmp_path):
    prep = _case(tmp_path, model_extra='likelihood = "student_t"\nstudent_nu = 4.0')
    assert np.isfinite(prep.log_post(_x(prep))[0])
    pw = prep.log_post.pointwise(_x(prep))
    assert pw["obs.spectrum1"].shape == (1, prep.channels["obs"][0].n_points)
    with pytest.raises(ConfigError, match="Student-t"):
        _case(tmp_path, model_extra='likelihood = "student_t"',
              spec_extra=", calibration_order = 1")


def test_interpolation_error_adds_variance(tmp_path):
    plain = _case(tmp_path)
    with_err = _case(tmp_path, model_extra="interp_error = true")
    frac = with_err.channels["obs"][0].interp_frac
    assert frac is not None and np.all(frac >= 0) and frac.max() > 1e-4
    # noise-free data at the truth (3700 K is a grid node, so the model is exact there):
    # the extra variance only widens the Gaussian, which lowers the log-likelihood
    assert with_err.log_post(_x(with_err))[0] < plain.log_post(_x(plain))[0]


def test_parallax_gives_distance(tmp_path):
    from teffmc.derived import derived_quantities

    prep = _case(tmp_path, top_extra='parallax_mas = { dist = "normal", mean = 2.0, sd = 0.1 }')
    x = np.repeat(_x(prep), 4000, axis=0)
    d = derived_quantities(prep, x, np.random.default_rng(0))
    # d = 1000 / parallax [pc]: median 500 pc for 2.0 +- 0.1 mas
    assert np.median(d["distance_pc"]) == pytest.approx(500.0, rel=0.01)
    with pytest.raises(ConfigError, match="not both"):
        _case(tmp_path,
              top_extra='parallax_mas = { fixed = 2.0 }\ndistance_pc = { fixed = 500.0 }')


def test_report_formats_choose_the_files_of_a_run(tmp_path):
    """``[report] formats`` writes only the files asked (common practice, no source: a
    survey keeps the per-star files small); an unknown format is refused before fitting."""
    from small_star import small_star_config
    from teffmc.run import fit

    simulate_epoch(tmp_path, "alpha", load_grid("blackbody"), ModelSpec(),
                   {**TRUTH, "teff": 4000.0, "theta": 2.0}, resolution=100.0,
                   wave_range=(4500.0, 9000.0), rng=np.random.default_rng(1))
    text = small_star_config("alpha", 400)
    (tmp_path / "a.toml").write_text(text + '[report]\nformats = ["png", "csv"]\n')
    fit(tmp_path / "a.toml", tmp_path / "run", quiet=True)
    files = {p.name for p in (tmp_path / "run").iterdir()}
    assert {"corner.png", "fit.png", "table.csv", "summary.json", "summary.ecsv",
            "posterior.nc"} <= files
    assert not {f for f in files if f.endswith((".pdf", ".tex", ".md", ".html"))}
    with pytest.raises(ConfigError, match="formats"):
        _case(tmp_path, top_extra='[report]\nformats = ["png", "docx"]')
