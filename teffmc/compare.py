"""Hypothesis comparison of runs fitted to the same data.

Two estimates side by side:

* PSIS-LOO (Vehtari, Gelman & Gabry 2017, Statistics and Computing 27, 1413) through
  ArviZ, on every pointwise log-likelihood term (spectrum pixels and photometric
  bands). Differences are taken against the best run, with the standard error of
  the difference from the pointwise differences, ``se = sqrt(n var(d_i))`` (same
  paper, eq. 24). Pareto k > 0.7 flags points where the estimate is unreliable.
* The Bayesian evidence ln Z from nested sampling (see :mod:`teffmc.evidence`), when
  the runs computed it (``[sampler] evidence = true``).
"""

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import posterior as post_mod
from .errors import DataError

__all__ = ["compare_runs", "Comparison"]

K_WARN = 0.7  # Vehtari et al. 2017/2024: k above 0.7 makes the PSIS estimate unreliable


@dataclass
class Comparison:
    """What :func:`compare_runs` returns: compare.json rows, the terminal text, the folder."""

    rows: list
    text: str
    out: Path | None


def _in_memory(d, fitted):
    """Return ``(folder, posterior, summary)`` of run folder ``d``.

    Taken from the :class:`~teffmc.run.FitResult` of ``fitted`` whose ``out`` is ``d``
    (a run just fitted, compared in memory), else read from the folder.
    """
    from .report.tables import strict_json

    for r in fitted:
        if Path(r.out).resolve() == Path(d).resolve():
            return Path(d), r.posterior, strict_json(r.summary)
    return Path(d), *post_mod.load_run(d)


def compare_runs(run_dirs, out=None, *, fitted=()):
    """Compare hypotheses; write compare.json, compare.ecsv and the report into ``out``.

    The comparison's report: figures, compare_table.tex/.csv, report.html
    (teffmc.report.output). ``fitted``: FitResults of runs among ``run_dirs`` just
    fitted in this process, compared from memory instead of read back from their folders.
    """
    if len(run_dirs) < 2:
        raise DataError("compare needs at least two run folders", file=str(run_dirs[0]))
    runs = [_in_memory(d, fitted) for d in run_dirs]
    labels = [s.get("hypothesis") or d.name for d, _, s in runs]
    if len(set(labels)) != len(labels):
        raise DataError(f"two runs have the same name ({', '.join(labels)}); rename a folder",
                        file=str(run_dirs[-1]))
    ref_dir, ref_dt, _ = runs[0]
    for d, dt, _ in runs[1:]:
        if dt.attrs.get("data_checksum") != ref_dt.attrs.get("data_checksum"):
            raise DataError(
                f"runs were made on different data ({ref_dir} data sha256 "
                f"{ref_dt.attrs.get('data_checksum', '?')[:12]}, {d} data sha256 "
                f"{dt.attrs.get('data_checksum', '?')[:12]}); compare only runs on the same data",
                file=str(d))
    rows, pointwise = [], {}
    for d, dt, summ in runs:
        elpd, se, elpd_i, k = post_mod.loo(dt)
        pointwise[summ.get("hypothesis") or d.name] = elpd_i
        ev = summ.get("evidence", {})
        rows.append({"run": summ.get("hypothesis") or d.name, "path": str(d),
                     "elpd_loo": elpd, "se": se,
                     "n_points": int(elpd_i.size), "n_bad_k": int(np.sum(k > K_WARN)),
                     "max_k": float(np.max(k)), "converged": bool(summ["converged"]),
                     "log_z": _number(ev.get("log_z")), "log_z_err": _number(ev.get("log_z_err"))})
    rows.sort(key=lambda r: -r["elpd_loo"])
    best = rows[0]
    for r in rows:
        diff = pointwise[r["run"]] - pointwise[best["run"]]
        r["elpd_diff"] = float(diff.sum())
        r["se_diff"] = float(np.sqrt(diff.size * np.var(diff, ddof=1))) if r is not best else 0.0
        r["log_z_diff"] = float(r["log_z"] - best["log_z"])
        r["log_z_diff_err"] = float(np.hypot(r["log_z_err"], best["log_z_err"])) \
            if r is not best else 0.0
    text = _text(rows)
    if out is not None:
        out = Path(out)
        out.mkdir(parents=True, exist_ok=True)
        _write(rows, out)
        _report(out, rows, [(lab, dt, s, d) for lab, (d, dt, s) in zip(labels, runs)])
    return Comparison(rows=rows, text=text, out=out)


def _report(out, rows, runs):
    """Write the comparison's report files.

    When ``out`` is itself one of the runs (the demo's folder), that run's report gains
    the comparison.
    """
    from .report.output import write_comparison_products, write_run_products
    from .report.tables import strict_json

    comparison = {"rows": strict_json(rows), "runs": runs}
    own = [r for r in runs if Path(r[3]).resolve() == Path(out).resolve()]
    if own:
        write_run_products(out, dt=own[0][1], summary=own[0][2], comparison=comparison)
    else:
        write_comparison_products(out, comparison)


def _number(v):
    """Return a number from summary.json, NaN where null (or absent) means not computed."""
    return np.nan if v is None else float(v)


def _text(rows):
    lines = [f"{'run':>16s} {'elpd_loo':>10s} {'diff':>9s} {'se_diff':>8s} {'ln Z':>9s} "
             f"{'dlnZ':>8s}  notes"]
    for r in rows:
        notes = []
        if r["n_bad_k"]:
            notes.append(f"{r['n_bad_k']} points with Pareto k > {K_WARN}")
        if not r["converged"]:
            notes.append("NOT CONVERGED")
        lines.append(f"{r['run']:>16s} {r['elpd_loo']:10.1f} {r['elpd_diff']:9.1f} "
                     f"{r['se_diff']:8.1f} {r['log_z']:9.1f} {r['log_z_diff']:8.1f}  "
                     + "; ".join(notes))
    lines.append("elpd_loo: PSIS-LOO expected log predictive density (higher is better); "
                 "diff and se_diff against the best run. ln Z: nested-sampling evidence.")
    return "\n".join(lines)


def _write(rows, out):
    from astropy.table import Table

    from .report.tables import write_json

    write_json({"runs": rows}, out / "compare.json")   # ln Z without evidence: null
    cols = ["run", "elpd_loo", "se", "elpd_diff", "se_diff", "log_z", "log_z_err",
            "log_z_diff", "log_z_diff_err", "n_points", "n_bad_k", "max_k", "converged"]
    t = Table(rows=[[r[c] for c in cols] for r in rows], names=cols)
    t.meta["method"] = ("PSIS-LOO (Vehtari, Gelman & Gabry 2017) via ArviZ; evidence by nested "
                        "sampling (dynesty)")
    t.write(out / "compare.ecsv", format="ascii.ecsv", overwrite=True)
