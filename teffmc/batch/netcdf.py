"""The survey's posterior summaries in one netCDF file: ``OUT/batch-summaries.nc``.

Optional (``teffmc batch --netcdf``, ``fit_many(..., netcdf=True)``). One xarray Dataset
with the dimension ``star`` (input order, as batch.ecsv), the coordinates ``star``,
``config``, ``status`` and ``reason``, and for every parameter and derived quantity of any
star one float64 variable per statistic, ``<name>_<stat>`` for the stats of
:data:`NC_STATS` (NaN where a star lacks the quantity, failed or is pending). The numbers
are copied from each run's summary.json, never recomputed; written by h5netcdf, the engine
of the runs' posterior.nc (teffmc.posterior.save), replaced atomically like batch.ecsv.
"""

import time

from .tables import write_atomic

__all__ = ["NETCDF", "NC_STATS", "quantity_unit", "survey_dataset", "write_netcdf"]

NETCDF = "batch-summaries.nc"
#: the statistics of summary.json copied per quantity (teffmc.posterior.summarise)
NC_STATS = ("median", "p16", "p84", "mean", "sd", "r_hat", "ess_bulk")
#: statistics that carry the quantity's unit (the others are dimensionless)
_WITH_UNIT = ("median", "p16", "p84", "mean", "sd")
_WORDS = {"median": "posterior median", "p16": "16th percentile of the marginal posterior",
          "p84": "84th percentile of the marginal posterior", "mean": "posterior mean",
          "sd": "posterior standard deviation",
          "r_hat": "split R-hat (walkers pooled into groups, as the stop rule checks it)",
          "ess_bulk": "bulk effective sample size"}
NOTE = ("One entry per star along the dimension star, in input order (as batch.ecsv); "
        "<quantity>_<statistic> copied from each run's summary.json. NaN: the star has no "
        "such quantity, failed (reason says why) or is pending. status: ok | not_converged "
        "(do not quote these numbers) | failed | pending.")


def quantity_unit(name):
    """Return the unit of a parameter or derived quantity (``""``: dimensionless, unknown).

    teffmc.parameters.UNITS (as summary.ecsv), else the units of the derived quantities
    documented in teffmc.derived and teffmc.budget (teffmc.report.latex.DERIVED).
    """
    from ..parameters import UNITS
    from ..report.latex import DERIVED

    base = name.partition("@")[0]
    if base in UNITS:
        return UNITS[base]
    return DERIVED.get(base, ("", ""))[1]


def _names(rows):
    """Parameters first, then derived quantities, each in order of first appearance."""
    names = {"parameters": [], "derived": []}
    for r in rows:
        for group, found in names.items():
            found += [n for n in r["summaries"].get(group, {}) if n not in found]
    return names["parameters"] + [n for n in names["derived"] if n not in names["parameters"]]


def _value(row, name, stat):
    for group in ("parameters", "derived"):
        st = row["summaries"].get(group, {}).get(name)
        if st is not None:
            v = st.get(stat)
            return float("nan") if v is None else float(v)
    return float("nan")


def survey_dataset(rows):
    """Return the xarray Dataset of :func:`write_netcdf` for the table's rows."""
    import numpy as np
    import xarray as xr

    from .. import __version__

    coords = {"star": ("star", [r["star"] for r in rows]),
              "config": ("star", [r["config"] for r in rows]),
              "status": ("star", [r["status"] for r in rows]),
              "reason": ("star", [r["reason"] for r in rows])}
    data = {}
    for name in _names(rows):
        unit = quantity_unit(name)
        for stat in NC_STATS:
            values = np.array([_value(r, name, stat) for r in rows], dtype=float)
            data[f"{name}_{stat}"] = ("star", values, {
                "units": unit if stat in _WITH_UNIT else "",
                "quantity": name, "statistic": stat,
                "long_name": f"{name}: {_WORDS[stat]}"})
    ds = xr.Dataset(data, coords=coords)
    ds.attrs["teffmc_version"] = __version__
    ds.attrs["created"] = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
    ds.attrs["note"] = NOTE
    cautions = []  # the runs' cautions (e.g. the built-in grid's), once each
    for r in rows:
        cautions += [c for c in r["cautions"] if c not in cautions]
    ds.attrs["cautions"] = "\n".join(cautions)
    return ds


def write_netcdf(rows, out):
    """Write ``out/batch-summaries.nc`` atomically (temporary file + ``os.replace``)."""
    ds = survey_dataset(rows)
    write_atomic(out / NETCDF, lambda tmp: ds.to_netcdf(tmp, engine="h5netcdf"))
    return ds
