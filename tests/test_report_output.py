"""The one output path (teffmc/report/output.py): every file of a run's report, journal
figures (no overlapping text, units on every axis, column/page widths), the methods
paragraph checked against the run's own files, its BibTeX, and `teffmc report --format`.

The run is the small fixture of tests/report_run.py (conftest ``report_run``), not the
demo (minutes): two epochs, two hypotheses, a grid file with a real checksum.
"""

import hashlib
import json
import re
import subprocess
import tomllib

import matplotlib
import pytest

from teffmc import posterior as post_mod
from teffmc.cli import main
from teffmc.report import style
from teffmc.report.methods import achieved, prior_text
from teffmc.report.output import compared_runs, run_figures
from teffmc.runfolder import is_complete

matplotlib.use("Agg")

FIG = ("corner", "fit", "budget", "delta_teff", "diagnostics")
TEXT = ("table.tex", "table_aastex.tex", "table.csv", "methods.tex", "methods.md",
        "references.bib", "report.html", "summary.ecsv")


def _sha(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_fit_writes_every_report_file(report_run):
    top = report_run
    for hyp in ("veil", "cooling"):
        run = top / hyp
        for f in FIG:
            for ext in ("pdf", "png"):
                assert (run / f"{f}.{ext}").stat().st_size > 5000, (hyp, f, ext)
        for f in TEXT:
            assert (run / f).stat().st_size > 200, (hyp, f)
    # the folder of hypotheses: the comparison's own report
    for f in ("hypotheses.pdf", "hypotheses.png", "budget.png", "delta_teff.png",
              "compare_table.tex", "compare_table.csv", "report.html"):
        assert (top / f).stat().st_size > 200, f
    assert is_complete(top) and is_complete(top / "veil")


def test_pdf_figures_are_vector(report_run):
    """Text in the PDF is text (pdftotext reads the axis labels), not a picture."""
    fit_pdf = report_run / "veil" / "fit.pdf"
    txt = subprocess.run(["pdftotext", str(fit_pdf), "-"], capture_output=True, text=True,
                         check=True, timeout=60).stdout
    assert "wavelength [µm]" in txt and "residual [σ]" in txt
    assert "bright_spec.ecsv" in txt  # the data are named as in the config


# ------------------------------------------------------------------------- figures

def _axis_labels_ok(fig):
    """Every drawn axis with tick labels has a label; every label carries a unit in
    brackets or is a quantity declared dimensionless (style.DIMENSIONLESS)."""
    fig.canvas.draw()
    bad = []
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        for axis, label in ((ax.xaxis, ax.get_xlabel()), (ax.yaxis, ax.get_ylabel())):
            shown = [t for t in axis.get_ticklabels() if t.get_visible() and t.get_text()]
            if not shown and not label:
                continue
            if not label:
                # inner panels of a grid share the outer panel's label
                if _shares_label(fig, ax, axis):
                    continue
                bad.append(("no label", [t.get_text() for t in shown][:3]))
            elif not re.search(r"\[[^\]]+\]\s*$", label) and label not in style.DIMENSIONLESS:
                bad.append(("no unit", label))
    return bad


def _shares_label(fig, ax, axis):
    """True when another axes in the same column (x) or row (y) carries the label."""
    box = ax.get_position()
    for other in fig.axes:
        if other is ax or not other.get_visible():
            continue
        ob = other.get_position()
        if axis is ax.xaxis and abs(ob.x0 - box.x0) < 1e-3 and other.get_xlabel():
            return True
        if axis is ax.yaxis and abs(ob.y0 - box.y0) < 1e-3 and other.get_ylabel():
            return True
    return False


@pytest.fixture(scope="module")
def figures(report_run):
    top = report_run
    comparison = compared_runs(top)
    run = top / "veil"
    dt, summary = post_mod.load_run(run)
    figs = run_figures(dt, summary, (run / "log.txt").read_text(), comparison=comparison)
    yield figs
    import matplotlib.pyplot as plt

    plt.close("all")


@pytest.mark.parametrize("name", ["corner", "fit", "hypotheses", "budget", "delta_teff",
                                  "diagnostics"])
def test_figure_is_journal_ready(figures, name):
    fig, caption = figures[name]
    assert caption
    # column (3.5 in) or page (7.1 in) width (common practice, no source)
    assert fig.get_figwidth() in (style.COLUMN, style.PAGE)
    assert style.text_overlaps(fig) == []
    assert _axis_labels_ok(fig) == []
    # readable at that width: no text below 6 pt
    from matplotlib.text import Text

    sizes = [t.get_fontsize() for t in fig.findobj(Text) if t.get_text().strip()]
    assert min(sizes) >= 6


def test_overlap_check_can_fail():
    """The checker finds crowded tick labels and a label drawn over another."""
    fig = style.figure(style.COLUMN, 2.0)
    ax = fig.subplots()
    ax.plot([0, 1e6], [0, 1])
    ax.set_xticks([i * 25000 for i in range(41)])
    assert style.text_overlaps(fig)
    fig2 = style.figure(style.COLUMN, 2.0)
    ax2 = fig2.subplots()
    ax2.text(0.5, 0.5, "one label")
    ax2.text(0.52, 0.5, "another label")
    assert len(style.text_overlaps(fig2)) >= 1


def test_unit_check_can_fail():
    fig = style.figure(style.COLUMN, 2.0)
    ax = fig.subplots()
    ax.plot([0, 1], [0, 1])
    ax.set_xlabel("wavelength")
    ax.set_ylabel("flux [erg s-1 cm-2 A-1]")
    assert _axis_labels_ok(fig) == [("no unit", "wavelength")]
    ax.set_xlabel("wavelength [um]")
    ax.set_ylabel("")
    assert _axis_labels_ok(fig)[0][0] == "no label"


def test_masked_ranges_are_shaded(report_run):
    """The config masks 6800-7000 Angstrom: the fit figure shades a gap covering it."""
    from teffmc.report.figures import masked_gaps, panels_from_posterior

    dt, _ = post_mod.load_run(report_run / "veil")
    spec = [p for p in panels_from_posterior(dt) if p["kind"] == "spectrum"][0]
    gaps = masked_gaps(spec["x"])
    assert any(lo <= 6800.0 + 20 and hi >= 7000.0 - 20 for lo, hi in gaps), gaps
    assert spec["label"] == "bright: bright_spec.ecsv"


# ------------------------------------------------------------------------- methods

def _run_files(run):
    record = tomllib.loads((run / "run.toml").read_text(encoding="utf-8"))
    summary = json.loads((run / "summary.json").read_text(encoding="utf-8"))
    return record, summary


@pytest.mark.parametrize("hyp", ["veil", "cooling"])
def test_methods_match_the_run_files(report_run, hyp):
    """Acceptance 4 on the fixture (the demo is checked the same way, DEVELOPERS.md): every
    prior, the grid checksum, the stop rule and the achieved R-hat/ESS, parsed from
    run.toml and summary.json, appear in methods.md and methods.tex."""
    run = report_run / hyp
    record, summary = _run_files(run)
    md = (run / "methods.md").read_text(encoding="utf-8")
    tex = (run / "methods.tex").read_text(encoding="utf-8")
    t = record["teffmc"]
    priors = t["priors"]
    assert len(priors) >= 4
    for name, prior in priors.items():
        base = name.partition("@")[0]
        from teffmc.parameters import UNITS

        line = f"`{name}`"
        assert line in md, name
        assert prior_text(prior, UNITS.get(base, "")) in md, (name, prior)
        # every number of the prior, as given in the config
        for k, v in prior.items():
            if k != "dist":
                assert f"{float(v):g}" in md.split(line, 1)[1].split("\n", 1)[0], (name, k)
        assert r"\texttt{" + name.replace("_", r"\_") + "}" in tex
    if "distance_pc" in record:  # the distance prior of the config
        assert f"(distance): {prior_text(record['distance_pc'], 'pc')}" in md
    checksum = t["provenance"]["grid"]["checksum"]
    assert re.fullmatch(r"[0-9a-f]{64}", checksum) and checksum == summary["grid"]["checksum"]
    assert checksum in md and checksum in tex
    s = t["provenance"]["sampler"]
    stop = (f"longer than {s['tau_factor']:g} times the largest integrated autocorrelation "
            f"time τ, τ changed by less than {100 * s['tau_rtol']:g}% per 100 steps")
    assert stop in md
    assert f"was below {s['rhat_max']:g}" in md
    assert f"checked every {record['sampler']['check_every']} steps" in md
    ach = achieved(summary)
    worst = max((p["r_hat"], n) for n, p in summary["parameters"].items()
                if p["r_hat"] is not None)
    assert ach["r_hat"] == worst
    assert f"largest R-hat was {worst[0]:.3f} (`{worst[1]}`)" in md
    ess = min((p["ess_bulk"], n) for n, p in summary["parameters"].items()
              if p["ess_bulk"] is not None)
    assert f"smallest bulk effective sample size {ess[0]:.0f} (`{ess[1]}`)" in md
    assert f"first {summary['burn']} steps as burn-in" in md
    assert f"every {summary['thin']}th step" in md
    assert ("NOT met within" in md) == (not summary["converged"])
    for d in t["provenance"]["data"]:
        assert f"`{d['file']}`" in md and f"{d['n_points']}" in md


def test_references_hold_every_cited_key(report_run):
    run = report_run / "veil"
    tex = (run / "methods.tex").read_text(encoding="utf-8")
    bib = (run / "references.bib").read_text(encoding="utf-8")
    cited = {k.strip() for group in re.findall(r"\\citep\{([^}]*)\}", tex)
             for k in group.split(",")}
    entries = set(re.findall(r"^@\w+\{(\w+),", bib, flags=re.M))
    assert cited == entries
    # the methods and libraries actually used (veil: Mie through miepython)
    for key in ("ForemanMackey2013", "Goodman2010", "terBraak2006", "Vehtari2021",
                "Kumar2019", "Cardelli1989", "Gordon2024", "miepython", "Harris2020",
                "Astropy2013"):
        assert key in entries, key
    assert "from memory" in bib
    # the cooling hypothesis has no veil: no Mie citation
    cool = (report_run / "cooling" / "references.bib").read_text(encoding="utf-8")
    assert "@software{miepython" not in cool


def test_methods_tex_compiles_with_its_bibliography(report_run, tmp_path):
    """methods.tex + references.bib through pdflatex and bibtex (natbib, author-year)."""
    import shutil

    run = report_run / "veil"
    for f in ("methods.tex", "references.bib"):
        shutil.copy(run / f, tmp_path / f)
    (tmp_path / "doc.tex").write_text(
        r"\documentclass{article}\usepackage[T1]{fontenc}\usepackage[utf8]{inputenc}"
        r"\usepackage[authoryear]{natbib}\begin{document}\input{methods.tex}"
        r"\bibliographystyle{plainnat}\bibliography{references}\end{document}",
        encoding="utf-8")
    for cmd in (["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "doc.tex"],
                ["bibtex", "doc"],
                ["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "doc.tex"],
                ["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "doc.tex"]):
        r = subprocess.run(cmd, cwd=tmp_path, capture_output=True, text=True, timeout=120)
        assert r.returncode == 0, (cmd, r.stdout[-3000:])
    txt = subprocess.run(["pdftotext", "doc.pdf", "-"], cwd=tmp_path, capture_output=True,
                         text=True, check=True, timeout=60).stdout
    assert "Foreman-Mackey" in txt and "(?)" not in txt  # every citation resolved
    _, summary = _run_files(run)
    assert " ".join(txt.split()).count(summary["grid"]["checksum"][:16]) >= 1


# ------------------------------------------------------------------ teffmc report

def test_report_command_writes_the_formats_asked_and_keeps_the_sources(report_run, tmp_path):
    import shutil

    run = tmp_path / "copy"
    shutil.copytree(report_run / "veil", run)
    for f in ("fit.pdf", "fit.png", "methods.md", "report.html", "table.tex"):
        (run / f).unlink()
    sources = {f: _sha(run / f) for f in ("summary.json", "posterior.nc", "run.toml",
                                          "log.txt")}
    assert main(["report", str(run), "--format", "pdf,md"]) == 0
    assert (run / "fit.pdf").is_file() and (run / "methods.md").is_file()
    assert not (run / "fit.png").exists() and not (run / "report.html").exists()
    assert not (run / "table.tex").exists()
    assert {f: _sha(run / f) for f in sources} == sources
    assert is_complete(run)
    assert main(["report", str(run), "--format", "html,docx"]) == 2


def test_run_table_compiles_and_shows_summary_values(report_run, tmp_path):
    """Acceptance 1 on a real run: table.tex through pdflatex; the compiled text holds
    every parameter's value rounded by the rule (tests/test_latex_tables.py) from
    summary.json."""
    from teffmc.report.latex import round_value

    run = report_run / "veil"
    (tmp_path / "doc.tex").write_text(
        r"\documentclass{article}\usepackage[T1]{fontenc}\begin{document}"
        + (run / "table.tex").read_text(encoding="utf-8") + r"\end{document}",
        encoding="utf-8")
    r = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "doc.tex"],
                       cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stdout[-3000:]
    txt = subprocess.run(["pdftotext", "doc.pdf", "-"], cwd=tmp_path, capture_output=True,
                         text=True, check=True, timeout=60).stdout
    tokens = set(txt.replace("−", " ").replace("+", " ").replace("±", " ").split())
    _, summary = _run_files(run)
    for name, s in summary["parameters"].items():
        rv = round_value(s["median"], s["p84"] - s["median"], s["median"] - s["p16"])
        value = re.match(r"\(?(-?[\d.]+)", rv.text).group(1).lstrip("-")
        assert value in tokens, (name, rv.text)
