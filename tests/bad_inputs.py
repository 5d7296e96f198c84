"""Shared by the bad-input tests (test_bad_inputs_more.py, test_bad_inputs_signals.py):
an INVENTED blackbody star's photometry, a config fitting it, and the checks of a one-line
refusal."""

import json
import textwrap

import numpy as np

from teffmc.cli import main
from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.simulate import simulate_epoch

TRUTH = {"teff": 4000.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 2.0}
PRIORS = """\
    [priors]
    teff = { dist = "uniform", low = 3000, high = 5000 }
    logg = { fixed = 0.0 }
    mh = { fixed = 0.0 }
    """
TINY = """\
    [sampler]
    n_walkers = 8
    max_steps = 20
    min_steps = 20
    check_every = 10
    n_starts = 2
    seed = 3
    """


def phot_table(folder):
    """Photometry of a blackbody star written into ``folder`` (all the tests need is
    something to fit); returns the table's text."""
    _, path = simulate_epoch(folder, "s", load_grid("blackbody"), ModelSpec(), TRUTH,
                             resolution=200.0, rng=np.random.default_rng(2))
    return path.read_text()


def config_file(tmp_path, phot, *, top="", priors=PRIORS, sampler=TINY, tail=""):
    """A blackbody config fitting photometry only; returns its path."""
    (tmp_path / "p.ecsv").write_text(phot)
    (tmp_path / "star.toml").write_text(
        'grid = "blackbody"\n' + textwrap.dedent(top) + '[[epoch]]\nphotometry = "p.ecsv"\n'
        + textwrap.dedent(priors) + textwrap.dedent(sampler) + textwrap.dedent(tail))
    return tmp_path / "star.toml"


def fit_cli(capsys, config, out, *extra):
    rc = main(["fit", str(config), "--out", str(out), "--quiet", *extra])
    cap = capsys.readouterr()
    return rc, cap.err.strip()


def one_line(rc, err, code, *needles):
    assert rc == code, err
    assert len(err.splitlines()) == 1, err
    assert "Traceback" not in err
    for n in needles:
        assert n in err, (n, err)


def nothing_left(out):
    assert not out.exists(), sorted(out.iterdir()) if out.is_dir() else out
    assert not out.with_name(out.name + ".partial").exists()


def no_nan(text):
    def refuse(name):
        raise AssertionError(f"bare {name} in strict JSON")

    return json.loads(text, parse_constant=refuse)
