"""Several grids in one config: each fitted, then stacked (teffmc.stacking)."""

import json
import textwrap

import numpy as np
import pytest

from teffmc.config import ModelSpec, load_config
from teffmc.errors import ConfigError
from teffmc.photosphere import load_grid
from teffmc.run import fit
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 3600.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 3.0}


def _write(tmp, grid_line, extra=""):
    (tmp / "m.toml").write_text(textwrap.dedent(f"""\
        name = "two grids (invented data)"
        {grid_line}
        {extra}
        [model]
        grid_nuisance = false
        [[epoch]]
        photometry = "s_phot.ecsv"
        spectra = [{{ file = "s_spec.ecsv", resolution = 300.0, mismatch = "none" }}]
        [priors]
        teff = {{ dist = "uniform", low = 3000, high = 4400 }}
        logg = {{ fixed = 0.0 }}
        mh = {{ fixed = 0.0 }}
        a_v = {{ dist = "uniform", low = 0.0, high = 3.0 }}
        theta = {{ dist = "loguniform", low = 0.3, high = 30.0 }}
        [sampler]
        n_walkers = 16
        max_steps = 6000
        check_every = 250
        seed = 4
        """), encoding="utf-8")
    return tmp / "m.toml"


def test_config_takes_a_list_of_grids_and_refuses_repeats(tmp_path):
    simulate_epoch(tmp_path, "s", load_grid("blackbody"), ModelSpec(), TRUTH,
                   wave_range=(6000.0, 8000.0), resolution=300.0, rng=np.random.default_rng(1))
    cfg = load_config(_write(tmp_path, 'grid = ["builtin", "blackbody"]'))
    assert cfg.grids == ("builtin", "blackbody") and cfg.grid == "builtin"
    with pytest.raises(ConfigError, match="twice"):
        load_config(_write(tmp_path, 'grid = ["builtin", "builtin"]'))
    with pytest.raises(ConfigError, match="hypotheses"):
        load_config(_write(tmp_path, 'grid = ["builtin", "blackbody"]',
                           '[[hypothesis]]\nname = "a"\n[[hypothesis]]\nname = "b"'))


@pytest.mark.slow
def test_data_from_one_grid_give_it_the_weight(tmp_path):
    """Data made by the built-in grid (TiO bands) and fitted with it and with a Planck
    curve: stacking must give the built-in grid almost all the weight, and the combined
    Teff interval must then be the built-in grid's."""
    simulate_epoch(tmp_path, "s", load_grid("builtin"), ModelSpec(), TRUTH,
                   wave_range=(6000.0, 8000.0), resolution=300.0, rng=np.random.default_rng(2))
    res = fit(_write(tmp_path, 'grid = ["builtin", "blackbody"]'), tmp_path / "run",
              quiet=True)
    stack = json.loads((tmp_path / "run" / "stack.json").read_text())
    assert stack["weights"]["builtin"] > 0.95
    assert res.out.name == "grid-builtin"
    c = stack["parameters"]["teff"]["combined"]
    g = stack["parameters"]["teff"]["per_grid"]["builtin"]
    assert c["median"] == pytest.approx(g["median"], abs=0.5 * (g["p84"] - g["p16"]))
    assert c["p2.5"] <= TRUTH["teff"] <= c["p97.5"], c
    assert (tmp_path / "run" / "stack.ecsv").is_file()
