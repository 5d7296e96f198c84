"""Bad input refused before anything is written, and assumptions said in the log
(issue 13): an empty epoch list, too few walkers, a band given twice, a spectrum
without a line-spread function, a resolution above the grid's.
"""

import textwrap

import numpy as np
import pytest

from teffmc.cli import main
from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.run import prepare
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 4000.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 2.0}


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    d = tmp_path_factory.mktemp("assumed")
    simulate_epoch(d, "s", load_grid("blackbody"), ModelSpec(), TRUTH, resolution=300.0,
                   wave_range=(5000.0, 8000.0), rng=np.random.default_rng(4))
    return d


def _config(folder, body):
    path = folder / "c.toml"
    path.write_text(textwrap.dedent(body))
    return path


def _refused(capsys, path, out, *needles):
    rc = main(["fit", str(path), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err.strip()
    assert rc == 2, err
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    for n in needles:
        assert n in err, err
    # nothing written: no run folder, no OUT.partial, no lock file
    assert not out.exists() and not out.with_name(out.name + ".partial").exists()
    assert not out.with_name(out.name + ".lock").exists()
    return err


def test_empty_epoch_list(data, tmp_path, capsys):
    path = _config(data, 'grid = "blackbody"\nepoch = []\n')
    _refused(capsys, path, tmp_path / "run", "c.toml:epoch: is empty", "[[epoch]]")


def test_too_few_walkers_refused_before_the_start_search(data, tmp_path, capsys):
    # emcee's stretch move needs at least 2 x ndim walkers (Goodman & Weare 2010 ensemble;
    # emcee refuses fewer) -- here 3 free parameters (teff, a_v, theta), 4 walkers
    path = _config(data, """\
        grid = "blackbody"
        [[epoch]]
        photometry = "s_phot.ecsv"
        [priors]
        logg = { fixed = 0.0 }
        mh = { fixed = 0.0 }
        [sampler]
        n_walkers = 4
        """)
    _refused(capsys, path, tmp_path / "run", "sampler.n_walkers", "2 x 3 free parameters = 6",
             "got 4", "teff")


@pytest.mark.parametrize("second", ["5.30", "5.00"])
def test_a_band_given_twice_is_refused(data, tmp_path, capsys, second):
    (data / "dup.csv").write_text(f"band,mag,err,system\nbessell-V,5.00,0.02,vega\n"
                                  f"bessell-B,6.1,0.02,vega\nbessell-V,{second},0.02,vega\n")
    path = _config(data, 'grid = "blackbody"\n[[epoch]]\nphotometry = "dup.csv"\n')
    _refused(capsys, path, tmp_path / "run", "dup.csv:band", "row 3: band bessell-V is also "
             "in row 1", "give each band once")


def _log_of(data, spectrum):
    path = _config(data, f"""\
        grid = "builtin"
        [[epoch]]
        spectra = [{{ file = "s_spec.ecsv"{spectrum} }}]
        [priors]
        teff = {{ dist = "uniform", low = 3400, high = 4500 }}
        """)
    lines = []
    prepare(path, log=lines.append)
    return [ln for ln in lines if "WARNING" in ln]


def test_no_line_spread_function_is_said(data):
    (w,) = _log_of(data, "")
    assert "s_spec.ecsv: WARNING: no resolution or fwhm_A given" in w


def test_resolution_above_the_grids_is_said(data):
    grid = load_grid("builtin")
    g = grid.wave[(grid.wave > 5000) & (grid.wave < 8000)]
    r_grid = np.median(g[1:] / np.diff(g)) / 2  # two pixels per resolution element
    assert _log_of(data, f", resolution = {r_grid * 0.5:.0f}") == []
    (w,) = _log_of(data, f", resolution = {r_grid * 4:.0f}")
    assert f"resolution R = {r_grid * 4:.0f} is above the grid's" in w
