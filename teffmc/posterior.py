"""Posterior storage and summaries. The ONLY module that imports arviz.

A run's posterior is an ArviZ DataTree saved as netCDF (``posterior.nc``) with the
groups ``posterior`` (sampled and derived quantities; walkers are the ``chain``
dimension, as usual for ensemble samplers), ``sample_stats`` (log-probability,
acceptance fraction), ``log_likelihood`` (pointwise terms per data set, for
PSIS-LOO), ``observed_data`` and ``posterior_predictive`` (thinned model spectra
and magnitudes). Root attributes hold the resolved config, package versions, seed,
grid checksum and the convergence verdict.
"""

import json
import warnings
from pathlib import Path

import numpy as np

from .errors import DataError
from .sampling_stop import RHAT_GROUPS, group_walkers

__all__ = ["build", "save", "load", "load_run", "summarise", "draws", "loo"]


def _to_chain_draw(a):
    """Swap axes: (n_draws, n_walkers, ...) -> (n_walkers, n_draws, ...)."""
    return np.swapaxes(np.asarray(a), 0, 1)


def build(result, *, derived, pointwise, observed, predictive, attrs, constant=None):
    """Assemble the DataTree.

    Parameters
    ----------
    result : teffmc.sample.SampleResult
        ``chain`` of shape (n_draws, n_walkers, ndim).
    derived : dict
        ``{name: (n_draws, n_walkers)}`` derived quantities.
    pointwise, predictive : dict
        ``{name: (n_draws, n_walkers, n_points)}``.
    observed : dict
        ``{name: (n_points,)}``, same names as ``pointwise``.
    attrs : dict
        Root attributes (strings or numbers).
    constant : dict, optional
        ``{name: array}`` fixed inputs (wavelengths, errors) stored in ``constant_data``.
    """
    import arviz as az

    post = {n: _to_chain_draw(result.chain[..., i]) for i, n in enumerate(result.names)}
    post.update({n: _to_chain_draw(v) for n, v in derived.items()})
    dims = {name: [f"{name}_point"] for name in observed}
    data = {
        "posterior": post,
        "sample_stats": {"lp": _to_chain_draw(result.log_prob)},
        "log_likelihood": {n: _to_chain_draw(v) for n, v in pointwise.items()},
        "observed_data": {n: np.asarray(v) for n, v in observed.items()},
        "posterior_predictive": {n: _to_chain_draw(v) for n, v in predictive.items()},
    }
    if constant:
        data["constant_data"] = {n: np.asarray(v) for n, v in constant.items()}
        for n in constant:
            dims[n] = [f"{n.rsplit('__', 1)[0]}_point"]
    # walkers are the "chain" dimension, so chain may be longer than draw: not an error
    dt = az.from_dict(data, dims=dims, check_conventions=False)
    stats = dt["sample_stats"].to_dataset()
    stats["acceptance_fraction"] = ("chain", np.asarray(result.acceptance_fraction))
    dt["sample_stats"] = stats
    for k, v in attrs.items():
        dt.attrs[k] = v if isinstance(v, (str, int, float)) else json.dumps(v)
    dt.attrs["sampled_names"] = json.dumps(list(result.names))
    dt.attrs["derived_names"] = json.dumps(list(derived))
    return dt


def save(dt, path):
    """Write the DataTree ``dt`` to ``path`` (netCDF-4 by h5netcdf: posterior.nc)."""
    dt.to_netcdf(str(path), engine="h5netcdf")


def load(path):
    """Read a DataTree written by :func:`save` (no completion check: see :func:`load_run`)."""
    import arviz as az

    return az.from_netcdf(str(path), engine="h5netcdf")


def load_run(run_dir):
    """Read a finished run folder: (DataTree from posterior.nc, dict from summary.json).

    Only a folder with a valid completion marker is read (teffmc.runfolder): anything
    else raises DataError saying why (interrupted, being written, a file changed).
    """
    from .runfolder import check_complete

    run_dir = Path(run_dir)
    run = check_complete(run_dir)
    if run.resolve() != run_dir.resolve():
        raise DataError(f"holds several runs (hypotheses or grids); give one of them, e.g. "
                        f"{run}", file=str(run_dir))
    nc, sj = run_dir / "posterior.nc", run_dir / "summary.json"
    return load(nc), json.loads(sj.read_text(encoding="utf-8"))


def draws(dt, name, group="posterior"):
    """All draws of one variable as a flat array (n_walkers * n_draws, ...)."""
    v = dt[group].ds[name].values
    return v.reshape(-1, *v.shape[2:])


def summarise(dt, names):
    """``{name: {median, p16, p84, mean, sd, r_hat, ess_bulk, ess_tail}}``."""
    import arviz as az

    post = dt["posterior"].ds[list(names)]
    # constant quantities (e.g. a derived value from fixed inputs) have no R-hat or ESS
    varying = [n for n in names if np.ptp(post[n].values) > 0]
    diag = {}
    if varying:
        sub = post[varying]
        # R-hat on the walkers pooled into RHAT_GROUPS chains, as the stop rule checks it
        # (why: teffmc.sampling_stop.split_rhat); ESS with each walker a chain
        diag = {"r_hat": {n: az.rhat(group_walkers(post[n].values.T, RHAT_GROUPS).T)
                          for n in varying},
                "ess_bulk": az.ess(sub, method="bulk"), "ess_tail": az.ess(sub, method="tail")}
    out = {}
    for n in names:
        x = post[n].values.ravel()
        p16, p50, p84 = np.percentile(x, [16, 50, 84])
        out[n] = {"median": float(p50), "p16": float(p16), "p84": float(p84),
                  "mean": float(x.mean()), "sd": float(x.std(ddof=1))}
        for k, v in diag.items():
            out[n][k] = float(np.asarray(v[n])) if n in varying else float("nan")
        if not diag:
            out[n].update(r_hat=float("nan"), ess_bulk=float("nan"), ess_tail=float("nan"))
    return out


def _joint_loglik(dt):
    """All pointwise log-likelihood terms of a run concatenated into one variable."""
    import arviz as az

    ll = dt["log_likelihood"].ds
    parts = [ll[v].values.reshape(ll[v].shape[0], ll[v].shape[1], -1) for v in ll.data_vars]
    joint = np.concatenate(parts, axis=-1)
    return az.from_dict({"posterior": {"_": joint[..., 0]}, "log_likelihood": {"all": joint}},
                        dims={"all": ["point"]}, check_conventions=False)


def loo(dt):
    """PSIS-LOO over every data point of a run: (elpd, se, pointwise elpd, pareto k)."""
    import arviz as az

    with warnings.catch_warnings():
        # teffmc reports the Pareto k values itself (compare.json, the compare table)
        warnings.filterwarnings("ignore", message="Estimated shape parameter of Pareto")
        res = az.loo(_joint_loglik(dt), pointwise=True, var_name="all")
    return (float(res.elpd), float(res.se), np.asarray(res.elpd_i).ravel(),
            np.asarray(res.pareto_k).ravel())
