"""Pointwise Student-t log-likelihood terms (used for PSIS-LOO), vectorised over pixels.

The reference is a direct per-pixel evaluation with scipy.stats.t.logpdf (location =
model, scale = sqrt(variance), the parametrisation stated in
teffmc.observe.calibration.student_t_loglike).
"""

import textwrap

import numpy as np
import pytest
from scipy import stats

from teffmc.config import ModelSpec
from teffmc.errors import ConfigError
from teffmc.observe.calibration import student_t_loglike, student_t_pointwise
from teffmc.photosphere import load_grid
from teffmc.run import prepare
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 3700.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 4.0,
         "jitter": 1.0}
NU = 3.5


def _reference(data, var, model, nu):
    """One pixel at a time, straight from scipy."""
    var = np.broadcast_to(var, model.shape)
    out = np.empty(model.shape)
    for w in range(model.shape[0]):
        for i in range(model.shape[1]):
            out[w, i] = stats.t.logpdf(data[i], df=nu, loc=model[w, i],
                                       scale=np.sqrt(var[w, i]))
    return out


@pytest.fixture
def arrays():
    rng = np.random.default_rng(7)
    n_w, n_pix = 6, 301
    model = rng.uniform(0.5, 1.5, size=(n_w, n_pix))
    var = rng.uniform(1e-4, 4e-3, size=(n_w, n_pix))
    data = model[0] + rng.normal(0.0, 0.03, n_pix)
    data[::37] += 0.5  # outliers, the reason to use a Student-t
    return data, var, model


@pytest.mark.parametrize("per_walker_var", [True, False])
@pytest.mark.parametrize("max_elements", [None, 1, 1000])
def test_pointwise_matches_scipy_per_pixel(arrays, per_walker_var, max_elements):
    data, var, model = arrays
    if not per_walker_var:
        var = var[0]
    kw = {} if max_elements is None else {"max_elements": max_elements}
    got = student_t_pointwise(data, var, model, NU, **kw)
    assert got.shape == model.shape
    np.testing.assert_allclose(got, _reference(data, var, model, NU), rtol=1e-10)
    # the pointwise terms add up to the total the sampler uses
    np.testing.assert_allclose(got.sum(axis=1), student_t_loglike(data, var, model, NU),
                               rtol=1e-12)


def test_pointwise_single_row_and_bad_nu(arrays):
    data, var, model = arrays
    got = student_t_pointwise(data, var[0], model[0], NU)
    assert got.shape == (model.shape[1],)
    np.testing.assert_allclose(got, _reference(data, var[0], model[:1], NU)[0], rtol=1e-10)
    with pytest.raises(ConfigError, match="student_nu"):
        student_t_pointwise(data, var, model, 0.0)


@pytest.fixture(scope="module")
def prep(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("studentt")
    simulate_epoch(tmp, "o", load_grid("builtin"), ModelSpec(), TRUTH,
                   wave_range=(5000.0, 8000.0), resolution=500.0,
                   rng=np.random.default_rng(3))
    (tmp / "o.toml").write_text(textwrap.dedent(f"""\
        grid = "builtin"
        [model]
        likelihood = "student_t"
        student_nu = {NU}
        grid_nuisance = false
        interp_error = true
        [[epoch]]
        photometry = "o_phot.ecsv"
        spectra = [{{ file = "o_spec.ecsv", resolution = 500.0 }}]
        [priors]
        logg = {{ fixed = 0.0 }}
        mh = {{ fixed = 0.0 }}
        jitter = {{ dist = "loguniform", low = 0.3, high = 3.0 }}
        """))
    return prepare(tmp / "o.toml", log=lambda m: None)


def _draws(prep, n=5):
    rng = np.random.default_rng(11)
    x = np.array([[TRUTH[k] for k in prep.space.names]] * n)
    names = list(prep.space.names)
    x[:, names.index("teff")] += rng.uniform(-60.0, 60.0, n)
    x[:, names.index("theta")] *= rng.uniform(0.97, 1.03, n)
    x[:, names.index("jitter")] = rng.uniform(0.5, 2.0, n)
    return x


def test_posterior_pointwise_matches_reference(prep):
    x = _draws(prep)
    pw = prep.log_post.pointwise(x)
    label = prep.space.labels[0]
    ch = prep.channels[label][0]
    assert ch.kind != "photometry" and ch.likelihood == "student_t"
    assert ch.interp_frac is not None
    p = prep.space.epoch_values(x, label)
    model = ch.predict(p)
    # the variance as documented in teffmc.likelihood: (jitter * err)^2 plus the grid
    # interpolation error (interp_frac * model)^2
    var = (p["jitter"][:, None] * ch.err[None, :]) ** 2 + (ch.interp_frac[None, :] * model) ** 2
    expected = _reference(ch.data, var, model, NU)
    got = pw[f"{label}.{ch.name}"]
    assert got.shape == (x.shape[0], ch.n_points)
    np.testing.assert_allclose(got, expected, rtol=1e-10)


def test_pointwise_terms_sum_to_the_sampled_log_likelihood(prep):
    # Student-t refuses a calibration polynomial, so nothing is marginalised: the pointwise
    # terms of every channel add up to log posterior - log prior of the same draw
    x = _draws(prep)
    pw = prep.log_post.pointwise(x)
    total = sum(v.sum(axis=1) for v in pw.values())
    loglike = prep.log_post(x) - prep.space.log_prior(x)
    assert np.all(np.isfinite(loglike))
    np.testing.assert_allclose(total, loglike, rtol=1e-12)
