"""``teffmc report RUN_DIR``: redraw figures and tables from a finished run's files."""

import json
from pathlib import Path

import numpy as np

from . import posterior as post_mod
from .report import corner_figure, fit_figure, write_summary

__all__ = ["panels_from_posterior", "redraw"]


def panels_from_posterior(dt):
    """Figure panels (see :func:`teffmc.report.fit_figure`) rebuilt from a DataTree."""
    panels = []
    for ch in json.loads(dt.attrs["channels"]):
        key = ch["key"]
        pred = dt["posterior_predictive"].ds[key].values
        panels.append({"kind": ch["kind"], "label": ch["label"], "bands": ch["bands"],
                       "data": dt["observed_data"].ds[key].values,
                       "x": dt["constant_data"].ds[f"{key}__x"].values,
                       "err": dt["constant_data"].ds[f"{key}__err"].values,
                       "draws": pred.reshape(-1, pred.shape[-1])})
    return panels


def redraw(run_dir):
    """Redraw corner.png, fit.png and the summary tables of ``run_dir``."""
    run_dir = Path(run_dir)
    dt, summary = post_mod.load_run(run_dir)
    names = json.loads(dt.attrs["sampled_names"])
    samples = np.column_stack([post_mod.draws(dt, n) for n in names])
    converged = bool(summary["converged"])
    title = dt.attrs.get("title", run_dir.name)
    corner_figure(samples, names, run_dir / "corner.png", converged=converged, title=title)
    fit_figure(panels_from_posterior(dt), run_dir / "fit.png", converged=converged, title=title)
    write_summary(summary, run_dir / "summary.json", run_dir / "summary.ecsv")
