"""posterior.load_run: a finished run folder read back (used by compare, report, fit)."""

import json
from types import SimpleNamespace

import numpy as np
import pytest

from teffmc import posterior as post_mod
from teffmc.errors import DataError
from teffmc.runfolder import write_marker


def _write_run(folder):
    rng = np.random.default_rng(0)
    n_draws, n_walkers = 5, 4
    result = SimpleNamespace(chain=rng.normal(size=(n_draws, n_walkers, 1)),
                             log_prob=rng.normal(size=(n_draws, n_walkers)),
                             acceptance_fraction=np.full(n_walkers, 0.3), names=("teff",))
    dt = post_mod.build(result, derived={},
                        pointwise={"obs.phot": rng.normal(size=(n_draws, n_walkers, 3))},
                        observed={"obs.phot": np.arange(3.0)},
                        predictive={"obs.phot": rng.normal(size=(n_draws, n_walkers, 3))},
                        attrs={"title": "t"})
    folder.mkdir()
    post_mod.save(dt, folder / "posterior.nc")
    (folder / "summary.json").write_text(json.dumps({"converged": True}), encoding="utf-8")
    write_marker(folder)  # written last by teffmc
    return result


def test_load_run_reads_posterior_and_summary(tmp_path):
    result = _write_run(tmp_path / "run")
    dt, summary = post_mod.load_run(tmp_path / "run")
    assert summary == {"converged": True}
    np.testing.assert_array_equal(post_mod.draws(dt, "teff"),
                                  np.swapaxes(result.chain[..., 0], 0, 1).ravel())


@pytest.mark.parametrize("missing", ["posterior.nc", "summary.json"])
def test_load_run_names_the_missing_file(tmp_path, missing):
    _write_run(tmp_path / "run")
    (tmp_path / "run" / missing).unlink()
    with pytest.raises(DataError, match=f"not a finished teffmc run: {missing} is missing"):
        post_mod.load_run(tmp_path / "run")


def test_load_run_refuses_a_folder_without_its_marker(tmp_path):
    _write_run(tmp_path / "run")
    (tmp_path / "run" / "complete.json").unlink()
    with pytest.raises(DataError, match="no completion marker complete.json"):
        post_mod.load_run(tmp_path / "run")


def test_load_run_refuses_a_file_changed_after_the_finish(tmp_path):
    _write_run(tmp_path / "run")
    (tmp_path / "run" / "summary.json").write_text(json.dumps({"converged": False}))
    with pytest.raises(DataError, match="summary.json changed after the run finished"):
        post_mod.load_run(tmp_path / "run")
