"""Two epochs in one fit, and the comparison of runs (issue: epochs and hypotheses)."""

import json

import numpy as np
import pytest

from teffmc.cli import main
from teffmc.config import ModelSpec
from teffmc.errors import ConvergenceWarning
from teffmc.photosphere import load_grid
from teffmc.run import fit
from teffmc.simulate import simulate_epoch

BASE = {"logg": 0.0, "mh": 0.0, "a_v": 0.6, "r_v": 3.1}
EPOCHS = {"bright": {**BASE, "teff": 4400.0, "theta": 3.0},
          "faint": {**BASE, "teff": 4200.0, "theta": 2.9}}

CONFIG = """\
grid = "blackbody"
[[epoch]]
label = "bright"
photometry = "bright_phot.ecsv"
spectra = [{{ file = "bright_spec.ecsv", resolution = 300.0, mismatch = "none" }}]
[[epoch]]
label = "faint"
photometry = "faint_phot.ecsv"
spectra = [{{ file = "faint_spec.ecsv", resolution = 300.0, mismatch = "none" }}]
[priors]
teff = {{ dist = "uniform", low = 3000, high = 6000 }}
logg = {{ fixed = 0.0 }}
mh = {{ fixed = 0.0 }}
[sampler]
n_walkers = 24
max_steps = {max_steps}
check_every = 250
seed = {seed}
"""


def _make(folder, seed):
    rng = np.random.default_rng(seed)
    for label, truth in EPOCHS.items():
        simulate_epoch(folder, label, load_grid("blackbody"), ModelSpec(), truth,
                       resolution=300.0, rng=rng)


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("epochs")
    _make(tmp, 1)
    (tmp / "a.toml").write_text(CONFIG.format(max_steps=6000, seed=1))
    (tmp / "b.toml").write_text(CONFIG.format(max_steps=6000, seed=2))
    ra = fit(tmp / "a.toml", tmp / "run_a", quiet=True)
    rb = fit(tmp / "b.toml", tmp / "run_b", quiet=True)
    other = tmp / "other"
    other.mkdir()
    _make(other, 99)   # same truth, different noise: different data
    (other / "c.toml").write_text(CONFIG.format(max_steps=600, seed=3))
    with pytest.warns(ConvergenceWarning):
        rc = fit(other / "c.toml", tmp / "run_c", quiet=True)
    return tmp, ra, rb, rc


def test_shared_parameters_have_one_column_per_epoch_ones_one_each(two_runs):
    _, ra, _, _ = two_runs
    names = list(ra.summary["parameters"])
    assert names.count("a_v") == 1 and "a_v@bright" not in names
    assert {"teff@bright", "teff@faint", "theta@bright", "theta@faint"} <= set(names)
    assert "teff" not in names
    for key in ("delta_teff@faint", "delta_v@faint", "dv_temperature@faint",
                "dv_veil@faint", "dv_radius@faint", "frac_temperature@faint"):
        assert key in ra.summary["derived"], key


def test_budget_parts_add_up_on_every_draw(two_runs):
    from teffmc import posterior

    dt = two_runs[1].posterior
    total = posterior.draws(dt, "delta_v@faint")
    parts = sum(posterior.draws(dt, f"dv_{k}@faint") for k in ("temperature", "veil", "radius"))
    np.testing.assert_allclose(parts, total, atol=1e-10)
    v = posterior.draws(dt, "v_mag@faint") - posterior.draws(dt, "v_mag@bright")
    np.testing.assert_allclose(total, v, atol=1e-10)


def test_compare_same_data_writes_tables_and_figure(two_runs, capsys):
    tmp = two_runs[0]
    rc = main(["compare", str(tmp / "run_a"), str(tmp / "run_b"), "--out", str(tmp / "cmp")])
    assert rc == 0
    out = json.loads((tmp / "cmp" / "compare.json").read_text())
    assert {r["run"] for r in out["runs"]} == {"run_a", "run_b"}
    # the same model on the same data: the two elpd estimates agree within their error
    best, second = out["runs"]
    assert abs(second["elpd_diff"]) < 2 * max(second["se_diff"], 0.5)
    for f in ("hypotheses.png", "hypotheses.pdf", "budget.png", "delta_teff.png"):
        assert (tmp / "cmp" / f).stat().st_size > 10_000, f
    assert r"run\_a" in (tmp / "cmp" / "compare_table.tex").read_text()  # escaped _
    assert (tmp / "cmp" / "report.html").stat().st_size > 10_000
    assert (tmp / "cmp" / "compare.ecsv").exists()


def test_compare_in_memory_equals_compare_from_the_folders(two_runs):
    """Runs just fitted are compared from their FitResults (not read back): same rows."""
    from teffmc.compare import compare_runs

    tmp, ra, rb, _ = two_runs
    dirs = [tmp / "run_a", tmp / "run_b"]
    disk = compare_runs(dirs)
    memory = compare_runs(dirs, fitted=[ra, rb])
    assert json.dumps(memory.rows) == json.dumps(disk.rows)   # NaN (no evidence) as text
    assert memory.text == disk.text


def test_compare_refuses_runs_on_different_data(two_runs, capsys):
    tmp = two_runs[0]
    rc = main(["compare", str(tmp / "run_a"), str(tmp / "run_c")])
    err = capsys.readouterr().err.strip()
    assert rc == 2
    assert len(err.splitlines()) == 1
    assert "different data" in err and "run_c" in err


def test_report_redraws_figures(two_runs):
    tmp = two_runs[0]
    fig = tmp / "run_a" / "fit.png"
    fig.unlink()
    assert main(["report", str(tmp / "run_a")]) == 0
    assert fig.stat().st_size > 10_000
