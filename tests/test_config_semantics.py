"""Config semantics that would otherwise silently give wrong posteriors or delete files."""

import textwrap

import numpy as np
import pytest

from teffmc.cli import main
from teffmc.config import ModelSpec, load_config
from teffmc.errors import ConfigError
from teffmc.parameters import ParameterSpace
from teffmc.photosphere import BlackbodyGrid, Grid
from teffmc.simulate import simulate_epoch

BOUNDS = BlackbodyGrid.BOUNDS


def _cfg(tmp_path, body, epochs=("a",)):
    (tmp_path / "p.csv").write_text("band,mag,err,system\nbessell-V,5.0,0.02,vega\n")
    ep = "".join(f'[[epoch]]\nlabel = "{e}"\nphotometry = "p.csv"\n' for e in epochs)
    (tmp_path / "c.toml").write_text('grid = "blackbody"\n' + textwrap.dedent(body) + ep)
    return load_config(tmp_path / "c.toml")


def test_epoch_prior_in_single_epoch_config_is_used(tmp_path):
    cfg = _cfg(tmp_path, '[priors]\n"teff@a" = { fixed = 3500.0 }\n')
    space = ParameterSpace(cfg, BOUNDS)
    assert "teff" not in space.names and space.fixed_values()["teff"] == 3500.0


def test_epoch_prior_on_a_shared_parameter_is_refused(tmp_path):
    cfg = _cfg(tmp_path, '[priors]\n"logg@b" = { fixed = 1.0 }\n', epochs=("a", "b"))
    with pytest.raises(ConfigError, match="shared"):
        ParameterSpace(cfg, BOUNDS)


def test_misspelt_shared_name_is_refused(tmp_path):
    cfg = _cfg(tmp_path, 'shared = ["logg", "a_V"]\n', epochs=("a", "b"))
    with pytest.raises(ConfigError, match="a_V"):
        ParameterSpace(cfg, BOUNDS)


def test_theta_prior_must_stay_positive(tmp_path):
    cfg = _cfg(tmp_path, '[priors]\ntheta = { dist = "normal", mean = 5.0, sd = 1.0 }\n')
    with pytest.raises(ConfigError, match="theta"):
        ParameterSpace(cfg, BOUNDS)


def test_per_epoch_r_v_gets_its_own_extinction_table(tmp_path):
    from teffmc.photosphere import load_grid
    from teffmc.run import prepare

    truth = {"teff": 4000.0, "logg": 0.0, "mh": 0.0, "a_v": 1.0, "r_v": 3.1, "theta": 2.0}
    for lab in ("a", "b"):
        simulate_epoch(tmp_path, lab, load_grid("blackbody"), ModelSpec(), truth,
                       resolution=200.0, noise=False)
    (tmp_path / "c.toml").write_text(textwrap.dedent("""\
        grid = "blackbody"
        shared = ["logg", "mh", "a_v", "theta"]
        [[epoch]]
        label = "a"
        spectra = [{ file = "a_spec.ecsv", resolution = 200.0, mismatch = "none" }]
        [[epoch]]
        label = "b"
        spectra = [{ file = "b_spec.ecsv", resolution = 200.0, mismatch = "none" }]
        [priors]
        "r_v@a" = { fixed = 3.1 }
        "r_v@b" = { fixed = 4.0 }
        logg = { fixed = 0.0 }
        mh = { fixed = 0.0 }
        """))
    prep = prepare(tmp_path / "c.toml", log=lambda m: None)
    x = np.array([[truth[n.partition("@")[0]] for n in prep.space.names]])
    assert np.isfinite(prep.log_post(x)[0])


def test_single_node_axes_become_fixed():
    wave = np.linspace(4000, 9000, 20)
    g = Grid([3000.0, 3500.0], [0.0], [0.0], wave, np.zeros((2, 1, 1, 20)))
    from teffmc.parameters import model_parameters

    p = model_parameters(ModelSpec(), g.bounds)
    assert p["logg"].fixed and p["mh"].fixed and not p["teff"].fixed


def test_out_folder_that_is_not_a_run_is_not_deleted(tmp_path, capsys):
    _cfg(tmp_path, "")
    victim = tmp_path / "precious"
    victim.mkdir()
    (victim / "notes.txt").write_text("keep me")
    rc = main(["fit", str(tmp_path / "c.toml"), "--out", str(victim), "--quiet"])
    assert rc == 2 and "not a teffmc run folder" in capsys.readouterr().err
    assert (victim / "notes.txt").read_text() == "keep me"


@pytest.mark.parametrize("body, key", [
    ('[sampler]\nseed = -1\n', "sampler.seed"),
    ('[model]\nlikelihood = "gaussian"\n[[hypothesis]]\nname = "h"\nlikelihood = "studentt"\n',
     "likelihood"),
])
def test_more_refused_values(tmp_path, body, key):
    with pytest.raises(ConfigError, match=key.split(".")[-1]):
        _cfg(tmp_path, body)


def test_scatter_cone_reaches_the_veil_and_is_bounded(tmp_path):
    from teffmc.model import Terms
    from teffmc.priors import Prior

    cfg = _cfg(tmp_path, '[model]\nveil = "mie"\nscattering = true\nscatter_cone_deg = 12.5\n')
    assert cfg.model.scatter_cone_deg == 12.5
    veil = Terms(np.array([4000.0, 8000.0]), cfg.model, Prior("fixed", value=3.1)).states["veil"]
    assert veil.scatter_cone_deg == 12.5 and veil.table.cone_deg == 12.5
    with pytest.raises(ConfigError, match="scatter_cone_deg"):
        _cfg(tmp_path, '[model]\nveil = "mie"\nscatter_cone_deg = 120.0\n')


def test_hypothesis_may_set_its_own_scatter_cone(tmp_path):
    cfg = _cfg(tmp_path, '[model]\nveil = "mie"\nscattering = true\n'
                         '[[hypothesis]]\nname = "hugging"\n'
                         '[[hypothesis]]\nname = "clump"\nscatter_cone_deg = 10.0\n')
    cones = {name: c.model.scatter_cone_deg for name, c in cfg.variants()}
    assert cones == {"hugging": 90.0, "clump": 10.0}
    with pytest.raises(ConfigError, match=r"hypothesis\[0\]\.scatter_cone_deg"):
        _cfg(tmp_path, '[[hypothesis]]\nname = "x"\nscatter_cone_deg = 91.0\n')
