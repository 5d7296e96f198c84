"""Paper tables: rounding rule, LaTeX (compiled by a real pdflatex) and CSV output.

pdflatex, pdftotext and AASTeX's aastex631.cls come from Debian's texlive-latex-base,
texlive-latex-recommended, texlive-fonts-recommended, texlive-plain-generic,
texlive-publishers and poppler-utils (.ci/run installs them); these tests never skip.
"""

import csv
import io
import json
import math
import subprocess

import pytest

from teffmc.cli import main
from teffmc.errors import ConfigError
from teffmc.report.latex import csv_table, latex_escape, latex_table, round_value
from teffmc.runfolder import write_marker

NAN = float("nan")

# Rounding rule of teffmc.report.latex: errors to 2 significant figures when their leading
# digit is 1 or 2, else 1; the value to the decimal place of the less precise error; \pm
# when the rounded errors are equal (common practice, no source). The first three rows are
# the cases the rule must reproduce; the others are worked by hand from the rule.
ROUNDING = [
    # median, plus, minus, LaTeX, (value, plus, minus)
    (3612.3, 21.4, 18.7, "3612^{+21}_{-19}", (3612, 21, 19)),
    (0.8808, 0.0199, 0.0197, r"0.881 \pm 0.020", (0.881, 0.020, 0.020)),
    (1.06, 0.03, 0.03, r"1.06 \pm 0.03", (1.06, 0.03, 0.03)),
    # leading digit 9: one figure
    (12.0046, 0.0911, 0.0910, r"12.00 \pm 0.09", (12.00, 0.09, 0.09)),
    # two figures each, unequal after rounding
    (0.71085, 0.0134, 0.0137, "0.711^{+0.013}_{-0.014}", (0.711, 0.013, 0.014)),
    # one-figure rounding carries into the next decade: the place is kept (1.0)
    (5.0, 0.96, 0.96, r"5.0 \pm 1.0", (5.0, 1.0, 1.0)),
    # errors of different precision: the value follows the coarser, each error its own
    (2.345, 0.5, 0.13, "2.3^{+0.5}_{-0.13}", (2.3, 0.5, 0.13)),
    # ties round half away from zero
    (0.125, 0.05, 0.05, r"0.13 \pm 0.05", (0.13, 0.05, 0.05)),
    # float noise: 1.13 - 1.10 = 0.029999999999999805 is read as 0.03 (one figure)
    (1.10, 1.13 - 1.10, 1.10 - 1.07, r"1.10 \pm 0.03", (1.10, 0.03, 0.03)),
    # negative value; a value rounding to zero prints no minus sign
    (-0.3456, 0.021, 0.019, "-0.346^{+0.021}_{-0.019}", (-0.346, 0.021, 0.019)),
    (-0.004, 0.3, 0.3, r"0.0 \pm 0.3", (0.0, 0.3, 0.3)),
    # |value| >= 1e5 or < 1e-3: the power of ten is factored out, figures kept
    (130663.79, 26507.2, 23856.9, r"(1.31^{+0.27}_{-0.24}) \times 10^{5}",
     (1.31e5, 2.7e4, 2.4e4)),
    (8.519044e-9, 1.2476e-10, 1.2985e-10, r"(8.52^{+0.12}_{-0.13}) \times 10^{-9}",
     (8.52e-9, 1.2e-10, 1.3e-10)),
    (0.0046088, 0.0022818, 0.0020861, "0.0046^{+0.0023}_{-0.0021}", (0.0046, 0.0023, 0.0021)),
    # no usable error: 4 significant figures, no error
    (0.5, 0.0, 0.0, "0.5000", (0.5, NAN, NAN)),
    (3612.345, NAN, 20.0, "3612", (3612, NAN, NAN)),
    (2.5e-7, None, None, r"2.500 \times 10^{-7}", (2.5e-7, NAN, NAN)),
]


def _same(a, b):
    return (math.isnan(a) and math.isnan(b)) or math.isclose(a, b, rel_tol=1e-12)


@pytest.mark.parametrize("median, plus, minus, text, numbers", ROUNDING)
def test_round_value(median, plus, minus, text, numbers):
    r = round_value(median, plus, minus)
    assert r.text == text
    assert all(_same(a, b) for a, b in zip((r.value, r.plus, r.minus), numbers)), r


def test_round_value_missing_median():
    assert round_value(None, 1.0, 1.0).text == r"\cdots"
    assert round_value(NAN, 1.0, 1.0).place is None


def _stats(median, p16, p84, **extra):
    return {"median": median, "p16": p16, "p84": p84, "mean": median, "sd": None,
            "r_hat": 1.001, "ess_bulk": 4000.0, "ess_tail": 4000.0, **extra}


def _summary(converged=False):
    """A hand-made summary.json dict: two epochs, a stat-only interval, special characters."""
    return {
        "hypothesis": "veil_50%",
        "converged": converged,
        "parameters": {
            "teff@bright": _stats(3612.3, 3593.6, 3633.7),
            "teff@faint_2": _stats(3560.0, 3540.0, 3575.0),
            "theta": _stats(12.0046, 11.9136, 12.0957,
                            median_stat=12.0046, p16_stat=11.9546, p84_stat=12.0546),
            "a_v": _stats(0.8808, 0.8611, 0.9007),
            "grain_radius": _stats(1.06, 1.03, 1.09),
            "mismatch_scale": _stats(130663.79, 106806.89, 157170.99),
        },
        "derived": {
            "f_bol@bright": _stats(8.519044e-9, 8.389194e-9, 8.643804e-9),
            "delta_teff@faint_2": _stats(-52.3, -55.0, -49.6),
            "dv_radius@faint_2": _stats(0.0, 0.0, 0.0),
        },
        "grid": {"name": "/home/me/grids/my_grid_50%&#~^{x}.h5",
                 "checksum": "35aaa6f4e272cd9a1990104118b5b4b62197885ca7011dca8d279e0a13cd19b2"},
    }


# the figures of every row's rounded value as pdftotext reads them (by hand from ROUNDING's
# rule): value, each printed error, the power of ten (pdftotext puts superscripts apart
# and prints U+2212 for a minus sign)
PRINTED = {"teff@bright": ["3612", "21", "19"], "teff@faint_2": ["3560", "15", "20"],
           "theta": ["12.00", "0.09", "0.05"], "a_v": ["0.881", "0.020"],
           "grain_radius": ["1.06", "0.03"], "mismatch_scale": ["1.31", "0.27", "0.24", "5"],
           "f_bol@bright": ["8.52", "0.12", "0.13", "−9"],
           "delta_teff@faint_2": ["−52.3", "2.7"], "dv_radius@faint_2": ["0"]}


def _compile(tmp_path, documentclass, table):
    (tmp_path / "table.tex").write_text(table, encoding="utf-8")
    (tmp_path / "doc.tex").write_text(
        rf"\documentclass{{{documentclass}}}\begin{{document}}\input{{table.tex}}"
        r"\end{document}", encoding="utf-8")
    run = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "doc.tex"],
                         cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stdout[-3000:]
    txt = subprocess.run(["pdftotext", "doc.pdf", "-"], cwd=tmp_path, capture_output=True,
                         text=True, check=True, timeout=60).stdout
    return " ".join(txt.split())


def _check_pdf_text(text, stat_header):
    # whole numbers only: "3612.3" must not pass for "3612"
    tokens = set(text.replace("(", " ").replace(")", " ").replace("+", " ").split())
    tokens |= {t.removeprefix("−") for t in tokens}
    for name, figures in PRINTED.items():
        for f in figures:
            assert f in tokens, (name, f, text)
    # an escaped _ prints as a low rule that pdftotext reads as a space, ~ ^ as accents
    for phrase in ("3612", "0.881 ± 0.020", "1.06 ± 0.03", "12.00 ± 0.09", "12.00 ± 0.05",
                   "× 10", "T eff (bright)", "(faint 2)", "µm", "km s", "16th–84th percentiles",
                   "grid 50%&#˜ˆ{x}.h5", "35aaa6f4e272", "NOT CONVERGED: do not quote",
                   "hypothesis veil 50%", stat_header):
        assert phrase in text.replace("Teff", "T eff"), (phrase, text)
    assert "35aaa6f4e272c" not in text      # 12 hex digits of the checksum, no more
    assert "/home/me" not in text           # the grid's file name, not the author's folder


def test_tabular_compiles_with_pdflatex(tmp_path):
    table = latex_table(_summary(), caption=None, label="tab:star")
    assert table.index("Fitted parameters") < table.index("Derived quantities")
    _check_pdf_text(_compile(tmp_path, "article", table), "Stat. only")


def test_deluxetable_compiles_with_aastex631(tmp_path):
    table = latex_table(_summary(), style="deluxetable")
    for part in (r"\begin{deluxetable}{lccc}", r"\tablecaption{", r"\tablehead{\colhead{Name}",
                 r"\startdata", r"\enddata", r"\tablecomments{", r"\end{deluxetable}",
                 r"\nodata"):
        assert part in table
    assert not table.split(r"\enddata")[0].rstrip().endswith(r"\\")  # no empty last row
    _check_pdf_text(_compile(tmp_path, "aastex631", table), "Stat. only")


def test_converged_verdict_and_no_stat_column():
    s = _summary(converged=True)
    del s["parameters"]["theta"]["median_stat"]
    table = latex_table(s)
    assert "Sampler: converged." in table and "NOT CONVERGED" not in table
    assert r"\begin{tabular}{lcc}" in table and "Stat." not in table


def test_latex_escape_every_special_character():
    assert latex_escape(r"a_b%c&d#e$f{g}h~i^j\k") == (
        r"a\_b\%c\&d\#e\$f\{g\}h\textasciitilde{}i\textasciicircum{}j\textbackslash{}k")


def test_bad_style_is_refused():
    with pytest.raises(ConfigError, match="deluxe"):
        latex_table(_summary(), style="longtable")


def test_csv_table_columns_and_numbers():
    rows = list(csv.DictReader(io.StringIO(csv_table(_summary()))))
    assert list(rows[0])[:6] == ["name", "unit", "median", "p16", "p84", "rounded_value"]
    by = {r["name"]: r for r in rows}
    assert [r["name"] for r in rows][:6] == list(_summary()["parameters"])  # parameters first
    assert by["teff@bright"]["unit"] == "K" and by["teff@bright"]["rounded_value"] == "3612"
    assert float(by["teff@bright"]["p84"]) == 3633.7
    assert by["a_v"]["rounded_value"] == "0.881"
    assert by["mismatch_scale"]["rounded_value"] == "1.31E+5"
    assert by["theta"]["p16_stat"] == "11.9546" and by["a_v"]["p16_stat"] == ""
    assert by["f_bol@bright"]["unit"] == "W m^-2"


def test_report_format_writes_tables(tmp_path, capsys):
    (tmp_path / "summary.json").write_text(json.dumps(_summary()), encoding="utf-8")
    (tmp_path / "run.toml").write_text('name = "HD 1_2 & Co"\n', encoding="utf-8")
    (tmp_path / "posterior.nc").write_bytes(b"")  # not read by --format
    assert main(["report", str(tmp_path), "--format", "csv"]) == 2  # no completion marker
    assert "no completion marker" in capsys.readouterr().err
    write_marker(tmp_path)
    assert main(["report", str(tmp_path), "--format", "tex,csv"]) == 0
    tex = (tmp_path / "table.tex").read_text(encoding="utf-8")
    assert r"\begin{tabular}" in tex and r"of HD 1\_2 \& Co" in tex
    assert r"\begin{deluxetable}" in (tmp_path / "table_aastex.tex").read_text(encoding="utf-8")
    assert (tmp_path / "table.csv").read_text(encoding="utf-8").startswith("name,unit,")
    assert main(["report", str(tmp_path), "--format", "docx"]) == 2
    assert "--format" in capsys.readouterr().err
    assert main(["report", str(tmp_path / "nothing"), "--format", "csv"]) == 2
