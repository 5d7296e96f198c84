"""Survey mode with a tenth of the configs broken: the other stars finish with the same
numbers, the broken one is recorded with its one-line reason, and the work that is the same
for every star is done once per worker (split from test_batch_faults.py so that pytest-xdist
runs it beside the kill tests)."""

import json

import numpy as np

import teffmc
from batch_helpers import blackbody_grid_file, same_row
from small_star import small_star_config
from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.simulate import simulate_epoch


def test_a_tenth_of_configs_broken(tmp_path):
    survey = tmp_path / "survey"
    survey.mkdir()
    grid_file = blackbody_grid_file(survey / "bb.h5")
    truth = {"teff": 4000.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 2.0}
    simulate_epoch(survey, "data", load_grid(grid_file), ModelSpec(), truth,
                   resolution=100.0, wave_range=(4500.0, 9000.0),
                   rng=np.random.default_rng(1))
    configs = []
    for k in range(1, 11):
        c = survey / f"s{k:02d}.toml"
        if k == 7:  # broken: not TOML
            c.write_text('grid = "blackbody"\n[priors\n')
        else:  # the same data and seed: every row must hold the same numbers
            c.write_text(small_star_config("data", 3000)
                         .replace('grid = "blackbody"', f'grid = "{grid_file}"'))
        configs.append(c)
    out = tmp_path / "out"
    t = teffmc.fit_many(configs, out, workers=2)
    assert list(t["status"]) == ["ok"] * 6 + ["failed"] + ["ok"] * 3
    reason = t["reason"][6]
    assert "s07.toml" in reason and "\n" not in reason and "internal error" not in reason
    assert any(ln.startswith("[") and "s07 failed" in ln and reason in ln
               for ln in (out / "batch.log").read_text().splitlines())
    ok = t[t["status"] == "ok"]
    for star in ok["star"][1:]:
        same_row(ok, star, ok[:1])
    assert abs(ok["teff_median"][0] - 4000.0) < 100.0
    # the work that is the same for every star was done once per worker: the grid file
    # read once, the extinction tables (3 per star: spectrum, bands) computed once
    engine = json.loads((out / "batch-engine.json").read_text())
    workers = engine["workers"].values()
    assert sorted(sum((w["stars"] for w in workers), [])) == list(t["star"])
    for w in workers:
        n = len([s for s in w["stars"] if s != "s07"])  # s07 stopped at its config
        if n == 0:
            continue
        assert w["caches"]["grid"] == [n - 1, n], w
        hits, uses = w["caches"]["extinction"]
        assert uses - hits == 3 and uses == 3 * n, w
    assert "worker caches" in (out / "batch.log").read_text().splitlines()[-1]
