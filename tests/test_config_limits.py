"""Choices and priors the numerical core would reject fail when the config is read.

Each case: exit status 2, one line naming the file, the key and the value, nothing
written. The limits come from where the core keeps them: the extinction law's R_V range
from ``dust_extinction`` (its ``Rv_range``), the optics table's grain radii
(``teffmc.dust.mietable.RADIUS_RANGE``), and physical limits (an extinction, an optical
depth, a covering fraction: common practice, no source).
"""

import textwrap

import pytest

from teffmc.cli import main
from teffmc.dust.extinction import law_ranges
from teffmc.dust.mietable import RADIUS_RANGE
from teffmc.parameters import parameter_limits

BASE = """\
grid = "blackbody"
[model]
veil = "mie"
extinction_law = "{law}"
grain_material = "{material}"
{hypothesis}
[[epoch]]
photometry = "phot.ecsv"
[priors]
teff = {{ dist = "uniform", low = 3000, high = 5000 }}
{priors}
[sampler]
max_steps = 200
"""

PHOT = """\
# %ECSV 1.0
# ---
# datatype:
# - {name: band, datatype: string}
# - {name: mag, datatype: float64}
# - {name: err, datatype: float64}
# - {name: system, datatype: string}
# schema: astropy-2.0
band mag err system
bessell-V 5.0 0.02 vega
bessell-R 4.0 0.02 vega
"""


def _case(tmp_path, capsys, *, law="CCM89", material="silicate", priors="", hypothesis=""):
    (tmp_path / "phot.ecsv").write_text(PHOT)
    path = tmp_path / "star.toml"
    path.write_text(BASE.format(law=law, material=material, priors=priors,
                                hypothesis=textwrap.dedent(hypothesis)))
    rc = main(["fit", str(path), "--out", str(tmp_path / "run"), "--quiet"])
    err = capsys.readouterr().err.strip()
    assert rc == 2, err
    assert len(err.splitlines()) == 1 and "Traceback" not in err, err
    assert "star.toml" in err, err
    assert not (tmp_path / "run").exists() and not (tmp_path / "run.partial").exists()
    return err


@pytest.mark.parametrize("kw, needles", [
    ({"law": "XYZ99"}, ["model.extinction_law", "XYZ99", "CCM89"]),
    ({"material": "cheese"}, ["model.grain_material", "cheese", "silicate"]),
    ({"hypothesis": '[[hypothesis]]\nname = "a"\nextinction_law = "F99x"\n'},
     ["hypothesis[0].extinction_law", "F99x"]),
    ({"hypothesis": '[[hypothesis]]\nname = "a"\ngrain_material = "ice9"\n'},
     ["hypothesis[0].grain_material", "ice9"]),
])
def test_unknown_names(tmp_path, capsys, kw, needles):
    err = _case(tmp_path, capsys, **kw)
    for n in needles:
        assert n in err, (n, err)


def test_grain_radius_outside_the_optics_table(tmp_path, capsys):
    err = _case(tmp_path, capsys,
                priors='grain_radius = { dist = "loguniform", low = 0.02, high = 50 }')
    assert "priors.grain_radius" in err and "50" in err
    assert f"[{RADIUS_RANGE[0]:g}, {RADIUS_RANGE[1]:g}]" in err


@pytest.mark.parametrize("law", ["CCM89", "F99", "G23"])
def test_r_v_outside_the_law(tmp_path, capsys, law):
    lo, hi = law_ranges(law)[1]
    err = _case(tmp_path, capsys, law=law,
                priors=f'r_v = {{ dist = "uniform", low = {lo:g}, high = {hi + 0.5:g} }}')
    assert "priors.r_v" in err and law in err and f"{hi + 0.5:g}" in err


def test_r_v_outside_a_hypothesis_law(tmp_path, capsys):
    # R_V 5.9 is inside CCM89's range (2-6, Cardelli et al. 1989 as dust_extinction
    # implements it) but outside G23's (2.3-5.6): the hypothesis that uses G23 refuses it
    assert law_ranges("CCM89")[1][1] >= 5.9 > law_ranges("G23")[1][1]
    err = _case(tmp_path, capsys, priors='r_v = { dist = "uniform", low = 2.5, high = 5.9 }',
                hypothesis='[[hypothesis]]\nname = "a"\nextinction_law = "G23"\n')
    assert "priors.r_v" in err and "G23" in err


@pytest.mark.parametrize("prior, needle", [
    ('a_v = { dist = "uniform", low = -1, high = 4 }', "priors.a_v"),
    ('a_v = { dist = "normal", mean = 1, sd = 0.3 }', "truncnormal"),
    ('veil_tau = { dist = "uniform", low = -0.5, high = 2 }', "priors.veil_tau"),
    ('veil_cover = { fixed = 1.5 }', "priors.veil_cover"),
])
def test_physical_limits(tmp_path, capsys, prior, needle):
    err = _case(tmp_path, capsys, priors=prior)
    assert needle in err, err


def test_limits_inside_are_accepted():
    # the limits themselves (not an error path): a prior on the boundary is allowed
    from teffmc.config import ModelSpec

    m = ModelSpec(extinction_law="F99")
    assert parameter_limits("r_v", m)[:2] == law_ranges("F99")[1]
    assert parameter_limits("a_v", m)[0] == 0.0 and parameter_limits("teff", m) is None


def test_off_grid_names_the_epoch(tmp_path):
    # the pointwise terms refuse a draw off the grid, naming the epoch whose parameters
    # left it (it named the first epoch's values whichever epoch it was)
    import numpy as np

    from teffmc.errors import OffGridError
    from teffmc.run import prepare

    (tmp_path / "phot.ecsv").write_text(PHOT)
    cfg = tmp_path / "two.toml"
    cfg.write_text(textwrap.dedent("""\
        grid = "blackbody"
        shared = ["theta"]
        [[epoch]]
        label = "early"
        photometry = "phot.ecsv"
        [[epoch]]
        label = "late"
        photometry = "phot.ecsv"
        [priors]
        teff = { dist = "uniform", low = 3000, high = 5000 }
        """))
    prep = prepare(cfg, log=lambda m: None)
    names = prep.space.names
    x = np.array([[{"teff@early": 3500.0, "teff@late": 3600.0}.get(n, 1.0) for n in names]])
    bounds = prep.grid.bounds["teff"]
    x_bad = x.copy()
    x_bad[0, names.index("teff@late")] = bounds[1] + 1000.0
    prep.log_post.pointwise(x)            # on the grid: no error
    with pytest.raises(OffGridError, match="epoch late") as info:
        prep.log_post.pointwise(x_bad)
    assert info.value.point["teff"] == bounds[1] + 1000.0


def test_checkpoint_every_is_refused_with_the_setting_that_does_it(tmp_path, capsys):
    # earlier versions accepted checkpoint_every and ignored it; the checkpoint is written
    # after every check_every steps
    (tmp_path / "phot.ecsv").write_text(PHOT)
    path = tmp_path / "star.toml"
    path.write_text(BASE.format(law="CCM89", material="silicate", priors="", hypothesis="")
                    + "checkpoint_every = 50\n")
    assert main(["fit", str(path), "--out", str(tmp_path / "run"), "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and not (tmp_path / "run.partial").exists()
    assert "sampler.checkpoint_every" in err and "check_every" in err
