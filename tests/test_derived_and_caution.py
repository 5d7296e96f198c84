"""Derived quantities and the plain caution of a run that did not converge."""

import json
import textwrap
import warnings

import numpy as np
import pytest

from teffmc.config import ModelSpec
from teffmc.derived import L_SUN_W, R_SUN_M, SIGMA_SB, bolometric, luminosity
from teffmc.errors import ConvergenceWarning
from teffmc.photosphere import load_grid
from teffmc.run import fit
from teffmc.simulate import simulate_epoch


def test_sun_nominal_luminosity():
    # IAU 2015 Resolution B3: R_sun = 6.957e8 m, Teff_sun = 5772 K, L_sun = 3.828e26 W
    assert luminosity(6.957e8, 5772.0**4) == pytest.approx(3.828e26, rel=1e-3)


def test_bolometric_relations_on_draws(rng):
    # L = 4 pi R^2 sigma T^4 and f_bol = (theta/2)^2 sigma T^4 (Stefan-Boltzmann law)
    p = {"teff": rng.uniform(3000, 4000, 50), "theta": rng.uniform(1, 20, 50)}
    d = rng.uniform(100, 2000, 50)
    out = bolometric(p, d)
    r_m = out["radius"] * R_SUN_M
    np.testing.assert_allclose(out["luminosity"] * L_SUN_W,
                               4 * np.pi * r_m**2 * SIGMA_SB * p["teff"] ** 4, rtol=1e-12)
    half = p["theta"] / 2 * np.pi / 648e6
    np.testing.assert_allclose(out["f_bol"], half**2 * SIGMA_SB * p["teff"] ** 4, rtol=1e-12)
    # at the star's own distance the flux diluted by (R/d)^2 is f_bol
    d_m = d * 3.0856775814913673e16  # pc in m, IAU 2015 Resolution B2
    np.testing.assert_allclose(out["luminosity"] * L_SUN_W / (4 * np.pi * d_m**2),
                               out["f_bol"], rtol=1e-10)


def test_short_run_says_not_converged(tmp_path):
    truth = {"teff": 4000.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 2.0}
    simulate_epoch(tmp_path, "s", load_grid("blackbody"), ModelSpec(), truth, resolution=200.0)
    (tmp_path / "s.toml").write_text(textwrap.dedent("""\
        grid = "blackbody"
        [[epoch]]
        photometry = "s_phot.ecsv"
        spectra = [{ file = "s_spec.ecsv", resolution = 200.0, mismatch = "none" }]
        [priors]
        logg = { fixed = 0.0 }
        mh = { fixed = 0.0 }
        [sampler]
        n_walkers = 16
        max_steps = 200
        min_steps = 100
        check_every = 100
        """))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = fit(tmp_path / "s.toml", tmp_path / "run", quiet=True)
    assert any(issubclass(w.category, ConvergenceWarning) for w in caught)
    s = json.loads((res.out / "summary.json").read_text())
    assert s["converged"] is False
    assert s["reason"] and "\n" not in s["reason"] and "max_steps" in s["reason"]
    assert any("not converged" in c for c in s["cautions"])
    assert "NOT CONVERGED" in (res.out / "summary.ecsv").read_text()
    assert "CAUTION: not converged" in (res.out / "log.txt").read_text()
    from PIL import Image

    for fig in ("corner.png", "fit.png"):
        with Image.open(res.out / fig) as im:
            assert "NOT CONVERGED" in im.text["Description"]
