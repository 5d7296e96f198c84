"""Stack finished runs of the same data made with different grids (files in, files out).

The numbers come from :mod:`teffmc.stacking`; this module reads the run folders, checks
they fitted the same data, and writes ``stack.json`` and ``stack.ecsv``.
"""

from pathlib import Path

import numpy as np

from . import posterior as post_mod
from .errors import DataError
from .parameters import UNITS
from .report.tables import write_json
from .stacking import mixture_summary, stacking_weights

__all__ = ["stack_runs"]


def _finite(x):
    return x if np.isfinite(x) else None


def stack_runs(run_dirs, labels, out, *, seed=1):
    """Stacking weights and combined intervals of runs on the same data.

    Returns a dict (as written to ``OUT/stack.json``) with ``weights``, ``elpd_loo`` per
    grid, ``parameters`` (per name: ``combined`` and one entry per grid) and ``text``.
    """
    runs = [(Path(d), *post_mod.load_run(d)) for d in run_dirs]
    ref = runs[0][1].attrs.get("data_checksum")
    for d, dt, _ in runs[1:]:
        if dt.attrs.get("data_checksum") != ref:
            raise DataError("runs to stack were made on different data", file=str(d))
    loos = [post_mod.loo(dt) for _, dt, _ in runs]
    w = stacking_weights(np.array([lo[2] for lo in loos]))
    rng = np.random.default_rng(seed)
    common = None
    for _, _, summ in runs:
        names = set(summ["parameters"]) | set(summ["derived"])
        common = names if common is None else common & names
    params = {}
    for name in sorted(common, key=lambda n: (n not in runs[0][2]["parameters"], n)):
        per = {}
        for lab, (_, _dt, summ) in zip(labels, runs):
            st = summ["parameters"].get(name) or summ["derived"][name]
            per[lab] = {k: _finite(st[k]) for k in ("median", "p16", "p84")}
        draws = [post_mod.draws(dt, name) for _, dt, _ in runs]
        params[name] = {"combined": mixture_summary(draws, w, rng), "per_grid": per}
    result = {
        "method": "stacking of predictive distributions (Yao et al. 2018) with PSIS-LOO",
        "weights": {lab: float(x) for lab, x in zip(labels, w)},
        "elpd_loo": {lab: float(lo[0]) for lab, lo in zip(labels, loos)},
        "converged": {lab: bool(s["converged"]) for lab, (_, _, s) in zip(labels, runs)},
        "parameters": params,
    }
    result["text"] = _text(result, labels)
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    write_json(result, out / "stack.json")
    _write_ecsv(result, labels, out / "stack.ecsv")
    return result


def _text(result, labels):
    lines = ["grid weights (stacking): " + ", ".join(
        f"{lab} {result['weights'][lab]:.3f}" for lab in labels)]
    if not all(result["converged"].values()):
        lines.append("CAUTION: not every grid's run converged: "
                     + ", ".join(k for k, v in result["converged"].items() if not v))
    for name in ("teff",) + tuple(n for n in result["parameters"] if n.startswith("teff@")):
        if name in result["parameters"]:
            c = result["parameters"][name]["combined"]
            lines.append(f"{name}: combined {c['median']:.1f} (+{c['p84'] - c['median']:.1f} "
                         f"-{c['median'] - c['p16']:.1f})")
    return "\n".join(lines)


def _write_ecsv(result, labels, path):
    from astropy.table import Table

    rows = []
    for name, p in result["parameters"].items():
        c = p["combined"]
        row = [name, UNITS.get(name.partition("@")[0], ""), c["median"], c["p16"], c["p84"]]
        for lab in labels:
            g = p["per_grid"][lab]
            row += [np.nan if g[k] is None else g[k] for k in ("median", "p16", "p84")]
        rows.append(row)
    names = ["name", "unit", "median", "p16", "p84"]
    for lab in labels:
        names += [f"{lab}_median", f"{lab}_p16", f"{lab}_p84"]
    t = Table(rows=rows, names=names, dtype=[str, str] + [float] * (len(names) - 2))
    t.meta["weights"] = result["weights"]
    t.meta["method"] = result["method"]
    t.write(path, format="ascii.ecsv", overwrite=True)
