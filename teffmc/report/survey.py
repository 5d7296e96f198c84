"""survey.html of a batch folder: one sortable row per star and the summary plots.

Numbers come from the batch table (batch.ecsv, itself copied from each run's
summary.json) and each run's summary.json (goodness of fit); nothing is recomputed.
"""

import json
import math
from pathlib import Path

import numpy as np

from . import style
from .figures import corner_order, param_label
from .html import rounded_html, survey_page

__all__ = ["write_survey_html", "survey_rows"]

TABLE = "batch.ecsv"   # teffmc.batch.tables.TABLE (not imported: batch imports this module)


def _f(x):
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def survey_rows(batch_dir):
    """``(rows, parameter names)`` of the batch table in ``batch_dir``."""
    from astropy.table import Table

    t = Table.read(Path(batch_dir) / TABLE, format="ascii.ecsv")
    names = [c[: -len("_median")] for c in t.colnames if c.endswith("_median")]
    rows = []
    for r in t:
        run = str(r["run"]) if "run" in t.colnames else ""
        run_dir = Path(batch_dir) / run if run else None
        values = {}
        for n in names:
            med, lo, hi = (_f(r[f"{n}_{k}"]) if not np.ma.is_masked(r[f"{n}_{k}"]) else None
                           for k in ("median", "p16", "p84"))
            if med is not None:
                values[n] = {"median": med, "p16": lo, "p84": hi,
                             "html": rounded_html(med, lo, hi)}
        chi2 = None
        if run_dir is not None and (run_dir / "summary.json").is_file():
            gof = json.loads((run_dir / "summary.json").read_text(encoding="utf-8")).get(
                "goodness_of_fit") or {}
            vals = [g["chi2_nu"] for g in gof.values() if g.get("chi2_nu") is not None]
            chi2 = max(vals) if vals else None
        link = (f"{run}/report.html" if run_dir is not None
                and (run_dir / "report.html").is_file() else None)
        n_steps = None if np.ma.is_masked(r["n_steps"]) else int(r["n_steps"])
        rows.append({"star": str(r["star"]), "status": str(r["status"]), "vals": values,
                     "chi2": chi2, "n_steps": n_steps, "link": link,
                     "reason": str(r["caution"] or r["reason"])})
    return rows, names


def _teff_av(rows, names):
    teff = next((n for n in names if n.partition("@")[0] == "teff"), None)
    av = next((n for n in names if n.partition("@")[0] == "a_v"), None)
    return teff, av


@style.styled
def survey_figures(rows, names):
    """Draw the survey figures as ``{name: PNG bytes}``.

    Teff histogram; Teff against A_V, not-converged stars flagged (open red diamonds).
    """
    teff, av = _teff_av(rows, names)
    images = {}
    if teff is None:
        return images
    ok = [r for r in rows if r["status"] == "ok" and teff in r["vals"]]
    bad = [r for r in rows if r["status"] == "not_converged" and teff in r["vals"]]
    fig = style.figure(style.COLUMN, 2.6)
    ax = fig.subplots()
    allv = [r["vals"][teff]["median"] for r in ok + bad]
    bins = np.histogram_bin_edges(allv, bins=min(20, max(5, len(allv)))) if allv else 10
    ax.hist([[r["vals"][teff]["median"] for r in ok], [r["vals"][teff]["median"]
                                                          for r in bad]],
            bins=bins, stacked=True, color=[style.SERIES[0], style.SERIES[1]],
            label=["converged", "not converged"])
    ax.set_xlabel(param_label(teff))
    ax.set_ylabel(style.unit_label("stars per bin", ""))
    from matplotlib.ticker import MaxNLocator

    ax.yaxis.set_major_locator(MaxNLocator(integer=True))
    ax.legend(frameon=False)
    images["teff_hist"] = _png(fig)
    if av is not None:
        fig = style.figure(style.COLUMN, 2.8)
        ax = fig.subplots()
        for group, color, marker, lab in ((ok, style.SERIES[0], "o", "converged"),
                                          (bad, style.SERIES[1], "D", "not converged")):
            pts = [(r["vals"][teff]["median"], r["vals"][av]["median"]) for r in group
                   if av in r["vals"]]
            if pts:
                x, y = np.array(pts).T
                ax.plot(x, y, marker, ls="none", ms=4, color=color,
                        mfc="none" if group is bad else color, label=lab)
        ax.set_xlabel(param_label(teff))
        ax.set_ylabel(param_label(av))
        ax.legend(frameon=False)
        images["teff_av"] = _png(fig)
    return images


def _png(fig):
    import io

    buf = io.BytesIO()
    plt = style._plt()
    with plt.rc_context(style.rc()):
        fig.savefig(buf, format="png")
    plt.close(fig)
    return buf.getvalue()


def write_survey_html(batch_dir):
    """Write ``batch_dir/survey.html`` and survey.tex from its batch table.

    survey.tex is the paper table of the same rows. Returns the path of survey.html.
    """
    batch_dir = Path(batch_dir)
    rows, names = survey_rows(batch_dir)
    shown = corner_order(names)
    columns = [{"name": n, "title": param_label(n).replace("$", "")
                .replace("\\mathrm", "").replace("{", "").replace("}", "")} for n in shown]
    html = survey_page(rows=rows, columns=columns, images=survey_figures(rows, names),
                       title=f"Survey {batch_dir.name}")
    path = batch_dir / "survey.html"
    path.write_text(html, encoding="utf-8")
    # the same rows as a LaTeX table (stars with a run; values rounded for print)
    from .latex import survey_latex

    done = [r for r in rows if r["vals"]]
    (batch_dir / "survey.tex").write_text(survey_latex(done, shown), encoding="utf-8")
    return path
