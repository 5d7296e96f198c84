"""The survey's combined netCDF (``teffmc batch --netcdf``, ``fit_many(netcdf=True)``):
OUT/batch-summaries.nc, one entry per star, numbers copied from each run's summary.json.

Tiny INVENTED stars of batch_helpers (blackbody grid, a few seconds each): alpha
converges, beta stops at 200 steps (not converged), gamma's data file does not exist
(failed). Given out of alphabetical order so that input order is checked. No physics is
computed here: the checks are that the file copies the runs exactly (common practice, no
source) and carries the units of teffmc.parameters.UNITS and the documented units of the
derived quantities (teffmc.derived.bolometric: f_bol in W m^-2, V in mag).
"""

import json
import math
import time

import numpy as np
import pytest
import xarray as xr
from astropy.table import Table

import teffmc
from batch_helpers import make_stars
from teffmc.batch import driver
from teffmc.batch.netcdf import NC_STATS, NETCDF, survey_dataset
from teffmc.batch.tables import row_from_summary
from teffmc.cli import main
from teffmc.sampling_stop import RHAT_WALKER_MAX

ORDER = ("beta", "gamma", "alpha")


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The batch through the command line without --netcdf, then fit_many(netcdf=True).

    The second call finds alpha and beta finished (their rows come from their runs) and
    fails gamma again.
    """
    stars = make_stars(tmp_path_factory.mktemp("stars"))
    out = stars.parent / "out"
    configs = [stars / f"{s}.toml" for s in ORDER]
    rc = main(["batch", *map(str, configs), "--out", str(out), "--quiet"])
    had_nc = (out / NETCDF).exists()
    table = teffmc.fit_many(configs, out, netcdf=True)
    with xr.open_dataset(out / NETCDF, engine="h5netcdf") as ds:
        ds = ds.load()
    return {"rc": rc, "had_nc": had_nc, "table": table, "out": out, "ds": ds}


def _summary(out, star):
    return json.loads((out / star / "summary.json").read_text(encoding="utf-8"))


def test_only_on_request_and_written_atomically(runs):
    assert runs["rc"] == 1
    assert not runs["had_nc"]
    assert list(runs["out"].glob(f".{NETCDF}.*")) == []  # no temporary file left


def test_one_entry_per_star_in_input_order(runs):
    ds, out = runs["ds"], runs["out"]
    t = Table.read(out / "batch.ecsv", format="ascii.ecsv")
    assert list(ds["star"].values) == list(ORDER) == list(t["star"])
    assert list(ds["status"].values) == ["not_converged", "failed", "ok"]
    assert list(ds["config"].values) == list(t["config"])
    assert ds.sizes == {"star": 3}


def test_medians_equal_the_table_exactly(runs):
    ds, out = runs["ds"], runs["out"]
    t = Table.read(out / "batch.ecsv", format="ascii.ecsv")
    cols = [c for c in t.colnames if c.rsplit("_", 1)[-1] in ("median", "p16", "p84")]
    assert {"teff_median", "a_v_median", "teff_p16", "a_v_p84"} <= set(cols)
    for col in cols:
        for i, star in enumerate(ORDER):
            v = float(ds[col].values[i])
            if np.ma.is_masked(t[col][i]):
                assert math.isnan(v), (col, star)
            else:
                assert v == t[col][i], (col, star)


def test_every_statistic_and_derived_quantity_copied(runs):
    ds, out = runs["ds"], runs["out"]
    for i, star in enumerate(ORDER):
        if star == "gamma":
            continue
        s = _summary(out, star)
        assert {"f_bol", "v_mag"} <= set(s["derived"])
        for group in ("parameters", "derived"):
            for name, st in s[group].items():
                for k in NC_STATS:
                    v = float(ds[f"{name}_{k}"].values[i])
                    want = st[k]
                    assert (math.isnan(v) if want is None else v == want), (star, name, k)
    # the converged star's diagnostics: R-hat (walkers pooled, teffmc.posterior.summarise)
    # below the stop rule's loosest limit; ESS > 100 (common practice, no source)
    alpha = ORDER.index("alpha")
    assert float(ds["teff_r_hat"][alpha]) < RHAT_WALKER_MAX
    assert float(ds["teff_ess_bulk"][alpha]) > 100


def test_failed_star_is_nan_with_its_reason(runs):
    ds = runs["ds"]
    g = ds.sel(star="gamma")
    assert str(g["status"].values) == "failed"
    assert "nowhere_spec.ecsv" in str(g["reason"].values)
    for name in ds.data_vars:
        assert math.isnan(float(g[name].values)), name


def test_units_and_global_attributes(runs):
    ds, out = runs["ds"], runs["out"]
    units = dict(zip(*[Table.read(out / "alpha" / "summary.ecsv", format="ascii.ecsv")[c]
                       for c in ("name", "unit")]))
    assert units["teff"] == "K" and units["a_v"] == "mag"
    for name in ("teff", "a_v"):
        for k in ("median", "p16", "p84", "mean", "sd"):
            assert ds[f"{name}_{k}"].attrs["units"] == units[name]
        assert ds[f"{name}_r_hat"].attrs["units"] == ""
        assert ds[f"{name}_ess_bulk"].attrs["units"] == ""
    # derived quantities: the units teffmc.derived.bolometric documents
    assert ds["f_bol_median"].attrs["units"] == "W m^-2"
    assert ds["v_mag_p84"].attrs["units"] == "mag"
    assert ds["teff_median"].attrs["quantity"] == "teff"
    assert ds["teff_median"].attrs["statistic"] == "median"
    assert ds.attrs["teffmc_version"] == teffmc.__version__
    created = time.mktime(time.strptime(ds.attrs["created"], "%Y-%m-%dT%H:%M:%SZ"))
    assert abs(created - time.mktime(time.gmtime())) < 3600
    assert "not_converged" in ds.attrs["note"]
    assert "built-in grid" not in ds.attrs["cautions"]  # blackbody grid: no such caution


def test_builtin_grid_caution_reaches_the_file(runs):
    from teffmc.pipeline import CAUTION_GRID

    out = runs["out"]
    row = row_from_summary("alpha", "alpha.toml", out / "alpha" / "summary.json", out, 1.0)
    row["cautions"] = [*row["cautions"], CAUTION_GRID]
    other = {**row, "star": "alpha2", "cautions": [CAUTION_GRID]}
    ds = survey_dataset([row, other])
    assert ds.attrs["cautions"].count(CAUTION_GRID) == 1


def test_netcdf_not_rewritten_on_every_star(runs, monkeypatch):
    calls = []
    monkeypatch.setattr(driver, "write_netcdf", lambda rows, out: calls.append(len(rows)))
    monkeypatch.setattr(driver, "write_tables", lambda rows, out: None)
    w = driver._Writer(runs["out"], netcdf=True)
    for _ in range(5):
        w([{}])
    assert calls == [1]  # the first write, then none within NETCDF_EVERY
    w([{}], final=True)
    assert calls == [1, 1]
    w = driver._Writer(runs["out"], netcdf=False)
    w([{}], final=True)
    assert calls == [1, 1]
