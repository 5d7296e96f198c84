"""``teffmc report RUN_DIR``: redraw figures and tables from a finished run's files."""

import json
import tomllib
from pathlib import Path

import numpy as np

from . import posterior as post_mod
from .errors import ConfigError, DataError
from .report import corner_figure, fit_figure
from .report.tables import write_summary_ecsv
from .runfolder import check_complete, run_lock

__all__ = ["panels_from_posterior", "redraw", "parse_formats", "write_tables", "TABLE_FORMATS"]

#: ``teffmc report --format`` names and the files each writes into the run folder
TABLE_FORMATS = {"tex": ("table.tex", "table_aastex.tex"), "csv": ("table.csv",)}


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
    """Redraw corner.png, fit.png and summary.ecsv of the finished run ``run_dir``.

    The run's sources (posterior.nc, summary.json: checksummed by its completion marker)
    are only read, so a report killed midway leaves a finished run finished."""
    run_dir = Path(run_dir)
    with run_lock(run_dir):
        dt, summary = post_mod.load_run(run_dir)
        names = json.loads(dt.attrs["sampled_names"])
        samples = np.column_stack([post_mod.draws(dt, n) for n in names])
        converged = bool(summary["converged"])
        title = dt.attrs.get("title", run_dir.name)
        corner_figure(samples, names, run_dir / "corner.png", converged=converged,
                      title=title)
        fit_figure(panels_from_posterior(dt), run_dir / "fit.png", converged=converged,
                   title=title)
        write_summary_ecsv(summary, run_dir / "summary.ecsv")


def parse_formats(text):
    """``"tex,csv"`` -> ``["tex", "csv"]``, checked against :data:`TABLE_FORMATS`."""
    formats = [f.strip() for f in text.split(",") if f.strip()]
    bad = [f for f in formats if f not in TABLE_FORMATS]
    if bad or not formats:
        raise ConfigError(f"should be a comma-separated list of {', '.join(TABLE_FORMATS)} "
                          f"but got {text!r}", key="--format", value=text)
    return formats


def write_tables(run_dir, formats):
    """Write the paper tables of ``run_dir`` from its summary.json; return the paths.

    ``tex``: table.tex (plain LaTeX tabular) and table_aastex.tex (AASTeX deluxetable);
    ``csv``: table.csv. The star name for the caption comes from run.toml when present.
    """

    run_dir = Path(run_dir)
    with run_lock(run_dir):
        if check_complete(run_dir).resolve() != run_dir.resolve():
            raise DataError("holds several runs (hypotheses or grids); give one of them",
                            file=str(run_dir))
        return _write_tables(run_dir, formats)


def _write_tables(run_dir, formats):
    from .report.latex import csv_table, latex_table

    summary = json.loads((run_dir / "summary.json").read_text(encoding="utf-8"))
    star = None
    if (run_dir / "run.toml").is_file():
        star = tomllib.loads((run_dir / "run.toml").read_text(encoding="utf-8")).get("name")
    text = {"table.tex": lambda: latex_table(summary, star=star),
            "table_aastex.tex": lambda: latex_table(summary, style="deluxetable", star=star),
            "table.csv": lambda: csv_table(summary)}
    written = []
    for f in formats:
        for name in TABLE_FORMATS[f]:
            (run_dir / name).write_text(text[name](), encoding="utf-8")
            written.append(run_dir / name)
    return written
