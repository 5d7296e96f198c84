"""The one output path: every file a run, a comparison or ``teffmc report`` writes.

``fit`` (at the end of each run), ``compare``, ``batch`` (through the runs it fits, plus
``survey.html``) and ``teffmc report RUN --format ...`` all come here. Sources are only
read (posterior.nc, summary.json, run.toml, log.txt, compare.json): the report step never
rewrites them, so a report killed midway leaves a finished run finished.

Formats and their files (``FORMATS``):

* ``png``, ``pdf``: the figures (``FIGURES``), PDF as vectors (large scatter layers
  rasterised inside the PDF);
* ``tex``: table.tex (LaTeX tabular), table_aastex.tex (AASTeX deluxetable), methods.tex,
  references.bib (and compare_table.tex for a comparison);
* ``md``: methods.md;
* ``csv``: table.csv (and compare_table.csv);
* ``html``: report.html, one self-contained page (figures embedded).

summary.ecsv is always rewritten (a product, see teffmc.runfolder).
"""

import json
import tomllib
from pathlib import Path

import numpy as np

from ..config_spec import REPORT_FORMATS as FORMATS
from ..errors import ConfigError, DataError
from . import style

__all__ = ["FORMATS", "FIGURE_FORMATS", "parse_formats", "write_report", "write_run_products",
           "write_comparison_products", "compared_runs"]

FIGURE_FORMATS = ("png", "pdf")


def parse_formats(text):
    """``"pdf,png,tex"`` -> ``["pdf", "png", "tex"]``, checked against :data:`FORMATS`."""
    formats = [f.strip() for f in str(text).split(",") if f.strip()]
    bad = [f for f in formats if f not in FORMATS]
    if bad or not formats:
        raise ConfigError(f"should be a comma-separated list of {', '.join(FORMATS)} "
                          f"but got {text!r}", key="--format", value=text)
    return list(dict.fromkeys(formats))


def _read_text(path):
    return path.read_text(encoding="utf-8") if path.is_file() else ""


def _record(folder):
    text = _read_text(folder / "run.toml")
    return tomllib.loads(text) if text else {}


# --------------------------------------------------------------------------- entry points

def write_report(run_dir, formats=FORMATS):
    """Write the report files of the finished run or folder of runs ``run_dir``.

    A folder of several runs (hypotheses, grids) gets each run's report and, with a
    comparison (compare.json), the comparison's. Returns the written paths.
    """
    from ..runfolder import check_complete

    run_dir = Path(run_dir)
    formats = list(formats)
    best = check_complete(run_dir)
    written = []
    if best.resolve() == run_dir.resolve():
        comparison = compared_runs(run_dir) if (run_dir / "compare.json").is_file() else None
        written += write_run_products(run_dir, formats, comparison=comparison)
        return written
    for sub in _sub_runs(run_dir):
        written += write_report(sub, formats)
    if (run_dir / "compare.json").is_file():
        written += write_comparison_products(run_dir, compared_runs(run_dir), formats)
    return written


def _sub_runs(folder):
    marker = json.loads(_read_text(folder / "complete.json") or "{}")
    subs = []
    for src in marker.get("sources", []):
        p = Path(src)
        if p.name == "complete.json" and len(p.parts) > 1:
            subs.append(folder / p.parent)
    return subs


def compared_runs(folder):
    """Read the comparison in ``folder``: ``{"rows": ..., "runs": [(name, dt, summary, path)]}``.

    ``rows`` are compare.json's; each run is found by its recorded path, else beside the
    comparison (``folder/<name>``, ``folder/hypotheses/<name>``, or ``folder`` itself).
    """
    from .. import posterior as post_mod

    rows = json.loads(_read_text(folder / "compare.json"))["runs"]
    runs = []
    for r in rows:
        cands = [Path(r.get("path", "")), folder / r["run"], folder / "hypotheses" / r["run"],
                 folder]
        for c in cands:
            if str(c) and (c / "summary.json").is_file():
                s = json.loads(_read_text(c / "summary.json"))
                if (s.get("hypothesis") or c.name) == r["run"] or c == Path(r.get("path", "")):
                    runs.append((r["run"], post_mod.load(c / "posterior.nc"), s, c))
                    break
        else:
            raise DataError(f"cannot find the run {r['run']!r} of the comparison",
                            file=str(folder / "compare.json"))
    return {"rows": rows, "runs": runs}


# ---------------------------------------------------------------------------- one run

def write_run_products(folder, formats=FORMATS, *, dt=None, summary=None, comparison=None):
    """Write every report file of the run in ``folder``.

    The run is finished or being finished by ``fit``: ``dt`` and ``summary`` may be given
    instead of read.
    """
    from .. import posterior as post_mod
    from .tables import write_summary_ecsv

    folder = Path(folder)
    if summary is None:
        summary = json.loads(_read_text(folder / "summary.json"))
    written = []
    write_summary_ecsv(summary, folder / "summary.ecsv")
    record = _record(folder)
    star = record.get("name")
    written += _write_tables(folder, formats, summary, star, comparison)
    written += _write_methods(folder, formats, record, summary, comparison)
    if not {"png", "pdf", "html"} & set(formats):
        return written
    if dt is None:
        dt = post_mod.load(folder / "posterior.nc")
    log_text = _read_text(folder / "log.txt")
    figs = run_figures(dt, summary, log_text, comparison=comparison)
    images = {}
    for name, (fig, _) in figs.items():
        written += style.save_many(fig, folder / name, [f for f in FIGURE_FORMATS
                                                         if f in formats],
                                   converged=bool(summary.get("converged")),
                                   keep_png=images, key=name)
    if "html" in formats:
        from .html import report_html

        captions = {name: cap for name, (_, cap) in figs.items()}
        html = report_html(summary=summary, record=record, log_text=log_text,
                           images=images, captions=captions, comparison=comparison,
                           methods_md=_read_text(folder / "methods.md") or None)
        (folder / "report.html").write_text(html, encoding="utf-8")
        written.append(folder / "report.html")
    return written


def run_figures(dt, summary, log_text, *, comparison=None):
    """``{file stem: (Figure, caption)}`` of one run (and its comparison, if any)."""
    from .. import posterior as post_mod
    from ..goodness import BAD_CHI2_NU
    from .figures import CORNER_MAX, corner_fig, fit_fig, panels_from_posterior
    from .figures_more import (
        budget_fig,
        delta_teff_fig,
        diagnostics_fig,
        hypotheses_fig,
        later_epochs,
    )

    converged = bool(summary.get("converged"))
    title = dt.attrs.get("title", "")
    bad = [k for k, g in (summary.get("goodness_of_fit") or {}).items()
           if g.get("chi2_nu") is not None and g["chi2_nu"] > BAD_CHI2_NU]
    fit_title = title + (f"\nBAD FIT: {len(bad)} data set(s) with chi2/nu > {BAD_CHI2_NU:g} "
                         "(see summary.json)" if bad else "")
    names = json.loads(dt.attrs["sampled_names"])
    samples = np.column_stack([post_mod.draws(dt, n) for n in names])
    figs = {"corner": (corner_fig(samples, names, converged=converged, title=title),
                       f"Posterior of the sampled parameters (at most {CORNER_MAX}, physical "
                       "ones first): marginal histograms with the 16th, 50th and 84th "
                       "percentiles (dashed), and contours holding 39 % and 86 % of the "
                       "draws."),
            "fit": (fit_fig(panels_from_posterior(dt), converged=converged, title=fit_title),
                    "Data (black), the posterior median model and its 16–84 % band, and "
                    "the residuals in units of the errors; masked ranges shaded.")}
    runs = [(summary.get("hypothesis") or "this run", dt)]
    if comparison:
        runs = [(name, d) for name, d, _, _ in comparison["runs"]]
        figs["hypotheses"] = (hypotheses_fig(runs, title=title),
                              "Each hypothesis's posterior median model over the same data, "
                              "with its residuals.")
    if later_epochs(dt):
        figs["budget"] = (budget_fig(runs, converged=converged),
                          "Dimming budget: ΔV between epochs split into temperature, veil "
                          "and radius parts (in that order, so the parts add up to ΔV); "
                          "median, 68 % (thick) and 95 % (thin) intervals.")
        figs["delta_teff"] = (delta_teff_fig(runs, converged=converged),
                              "Posterior of the temperature change between epochs.")
    figs["diagnostics"] = (diagnostics_fig(dt, summary, log_text, title=title),
                           "Convergence: rank plots (walkers in 4 groups; flat means they "
                           "agree), the stop rule's τ estimates against chain length with "
                           "the required N/50, and the Pareto k of every data point's "
                           "PSIS-LOO term (dashed: 0.7).")
    return figs


def _write_tables(folder, formats, summary, star, comparison):
    from .latex import compare_csv, compare_latex, csv_table, latex_table

    out = []
    files = {}
    if "tex" in formats:
        files["table.tex"] = latex_table(summary, star=star)
        files["table_aastex.tex"] = latex_table(summary, style="deluxetable", star=star)
        if comparison:
            files["compare_table.tex"] = compare_latex(comparison["rows"])
    if "csv" in formats:
        files["table.csv"] = csv_table(summary)
        if comparison:
            files["compare_table.csv"] = compare_csv(comparison["rows"])
    for name, text in files.items():
        (folder / name).write_text(text, encoding="utf-8")
        out.append(folder / name)
    return out


def _write_methods(folder, formats, record, summary, comparison):
    from .methods import methods_context, references, render_methods

    if not {"tex", "md"} & set(formats):
        return []
    ctx = methods_context(record, summary,
                          comparison=comparison["rows"] if comparison else None)
    out = []
    if "tex" in formats:
        text, keys = render_methods(ctx, "tex")
        (folder / "methods.tex").write_text(text, encoding="utf-8")
        (folder / "references.bib").write_text(references(ctx, keys), encoding="utf-8")
        out += [folder / "methods.tex", folder / "references.bib"]
    if "md" in formats:
        (folder / "methods.md").write_text(render_methods(ctx, "md")[0], encoding="utf-8")
        out.append(folder / "methods.md")
    return out


# --------------------------------------------------------------------- a comparison only

def write_comparison_products(folder, comparison, formats=FORMATS):
    """Write the files of a comparison in a folder that is not itself a run.

    Such a folder is ``teffmc compare --out`` or the folder of a config's hypotheses:
    compare tables, the hypotheses, budget and Delta Teff figures, and report.html linking
    each run's own report.
    """
    from .figures_more import budget_fig, delta_teff_fig, hypotheses_fig, later_epochs
    from .latex import compare_csv, compare_latex

    folder = Path(folder)
    written = []
    if "tex" in formats:
        (folder / "compare_table.tex").write_text(compare_latex(comparison["rows"]),
                                                   encoding="utf-8")
        written.append(folder / "compare_table.tex")
    if "csv" in formats:
        (folder / "compare_table.csv").write_text(compare_csv(comparison["rows"]),
                                                   encoding="utf-8")
        written.append(folder / "compare_table.csv")
    if not {"png", "pdf", "html"} & set(formats):
        return written
    runs = [(name, dt) for name, dt, _, _ in comparison["runs"]]
    converged = all(bool(s.get("converged")) for _, _, s, _ in comparison["runs"])
    title = runs[0][1].attrs.get("title", "")
    figs = {"hypotheses": (hypotheses_fig(runs, title=title),
                           "Each hypothesis's posterior median model over the same data.")}
    if later_epochs(runs[0][1]):
        figs["budget"] = (budget_fig(runs, converged=converged),
                          "Dimming budget per hypothesis (temperature, veil, radius).")
        figs["delta_teff"] = (delta_teff_fig(runs, converged=converged),
                              "Temperature change between epochs per hypothesis.")
    images = {}
    for name, (fig, _) in figs.items():
        written += style.save_many(fig, folder / name, [f for f in FIGURE_FORMATS
                                                         if f in formats],
                                   converged=converged, keep_png=images, key=name)
    if "html" in formats:
        from .html import comparison_html

        links = {name: _relative(path / "report.html", folder)
                 for name, _, _, path in comparison["runs"]}
        html = comparison_html(comparison=comparison, images=images,
                               captions={n: c for n, (_, c) in figs.items()}, links=links)
        (folder / "report.html").write_text(html, encoding="utf-8")
        written.append(folder / "report.html")
    return written


def _relative(path, start):
    import os

    return os.path.relpath(path, start)
