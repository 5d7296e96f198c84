r"""LaTeX and CSV tables of a finished run's summary, with values rounded for print.

Rounding rule (common practice, no source; a simpler form of the Particle Data Group's
rule, which keeps two figures up to a leading 354, from memory):

1. Each error is rounded to two significant figures when its leading digit is 1 or 2,
   otherwise to one (0.0199 -> 0.020, 21.4 -> 21, 0.03 -> 0.03, 0.091 -> 0.09). The
   leading digit is that of the unrounded error and the kept decimal place does not change
   when rounding carries into the next decade (0.96 -> 1.0, 0.0299 -> 0.030).
2. The value is rounded to the decimal place of the less precise error (the coarser last
   digit); each error keeps its own figures (2.345 +0.5 -0.13 -> 2.3^{+0.5}_{-0.13}).
3. When the rounded + and - errors are equal, ``value \pm error`` is printed.
4. Ties round half away from zero (0.125 -> 0.13). Inputs are first read to 10 significant
   digits, so differences of floats (1.06 - 1.03 = 0.030000000000000027) round as written.
5. Without a usable error (zero, negative, NaN or missing) the value is printed to 4
   significant figures and no error; a missing value prints ``\cdots``.
6. A value outside 1e-3 <= |value| < 1e5 (after rounding; the largest error when the value
   rounds to 0) is printed with its power of ten factored out:
   ``(1.31^{+0.27}_{-0.24}) \times 10^{5}``.
"""

import csv
import io
import math
import re
from decimal import ROUND_HALF_UP, Decimal, localcontext
from pathlib import PurePath
from typing import NamedTuple

from ..errors import ConfigError
from ..parameters import LABELS, UNITS

__all__ = ["Rounded", "round_value", "latex_escape", "latex_table", "csv_table", "compare_latex",
           "compare_csv", "survey_latex",
           "INTERVAL_NOTE"]

INTERVAL_NOTE = ("Values are posterior medians; intervals are the 16th--84th percentiles of "
                 "the marginal posterior.")
STAT_NOTE = ("Stat.\\ only: the same interval with the grid-physics nuisance parameters "
             "held at their nominal values.")
#: labels and units of derived quantities, which parameters.LABELS/UNITS do not list
#: (units as documented in derived.bolometric and budget.dimming_budget)
DERIVED = {"f_bol": (r"$f_\mathrm{bol}$", "W m^-2"), "radius": (r"$R$", "R_sun"),
           "luminosity": (r"$L$", "L_sun"), "v_mag": (r"$V$", "mag"),
           "delta_teff": (r"$\Delta T_\mathrm{eff}$", "K"), "delta_v": (r"$\Delta V$", "mag"),
           "dv_temperature": (r"$\Delta V_\mathrm{temperature}$", "mag"),
           "dv_veil": (r"$\Delta V_\mathrm{veil}$", "mag"),
           "dv_radius": (r"$\Delta V_\mathrm{radius}$", "mag"),
           "frac_temperature": (r"$\Delta V_\mathrm{temperature}/\Delta V$", "")}
#: plain-text unit -> plain LaTeX (no siunitx, no \micron)
LATEX_UNITS = {"um": r"$\mu$m", "km/s": r"km\,s$^{-1}$", "W m^-2": r"W\,m$^{-2}$",
               "R_sun": r"$R_\odot$", "L_sun": r"$L_\odot$"}
_ESCAPES = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
            "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
            "^": r"\textasciicircum{}"}


class Rounded(NamedTuple):
    """A rounded value: LaTeX math text (no ``$``) and the rounded numbers.

    ``plus``/``minus`` are NaN when no error is printed; ``place`` is the power of ten of
    the value's last kept digit (-3 for 0.881), None for a missing value.
    """

    text: str
    value: float
    plus: float
    minus: float
    place: int | None


def _dec(x):
    return Decimal(f"{float(x):.10g}")


def _usable(err):
    return err is not None and math.isfinite(err) and err > 0


def _round(d, place):
    with localcontext() as ctx:
        ctx.prec = 400  # a value far larger than its error needs many digits
        return d.quantize(Decimal(1).scaleb(place), rounding=ROUND_HALF_UP)


def _error_place(err):
    """Power of ten of the last kept digit of an error (rule 1)."""
    return err.adjusted() - (1 if err.as_tuple().digits[0] <= 2 else 0)


def _fmt(d):
    return format(abs(d) if d == 0 else d, "f")  # never "-0.00"


def round_value(median, plus, minus):
    """Round ``median`` with errors ``+plus`` / ``-minus`` (magnitudes) for print.

    The rule is the module docstring's (common practice, no source).

    Returns
    -------
    Rounded
        ``(text, value, plus, minus, place)``, e.g. ``round_value(3612.3, 21.4, 18.7)``
        gives text ``3612^{+21}_{-19}`` and the numbers 3612, 21, 19.
    """
    nan = float("nan")
    if median is None or not math.isfinite(median):
        return Rounded(r"\cdots", nan, nan, nan, None)
    v = _dec(median)
    if not (_usable(plus) and _usable(minus)):
        place = v.adjusted() - 3 if v != 0 else 0
        rv = _round(v, place)
        return Rounded(_compose(rv, None, None), float(rv) + 0.0, nan, nan, place)
    p, m = _dec(plus), _dec(minus)
    pp, pm = _error_place(p), _error_place(m)
    rp, rm = _round(p, pp), _round(m, pm)
    place = max(pp, pm)
    rv = _round(v, place)
    if rp == rm:
        rp = rm = _round(rp, place)
    return Rounded(_compose(rv, rp, rm), float(rv) + 0.0, float(rp), float(rm), place)


def _compose(rv, rp, rm):
    """LaTeX text of rounded Decimals (rule 6 for the power of ten)."""
    ref = rv if rv != 0 or rp is None else max(rp, rm)
    exp = ref.adjusted() if ref != 0 else 0
    sci = exp >= 5 or exp <= -4
    if sci:  # scaleb is exact: every number keeps its figures
        rv = rv.scaleb(-exp)
        rp, rm = (None, None) if rp is None else (rp.scaleb(-exp), rm.scaleb(-exp))
    if rp is None:
        core = _fmt(rv)
    elif rp == rm:
        core = rf"{_fmt(rv)} \pm {_fmt(rp)}"
    else:
        core = f"{_fmt(rv)}^{{+{_fmt(rp)}}}_{{-{_fmt(rm)}}}"
    if not sci:
        return core
    return (f"({core})" if rp is not None else core) + rf" \times 10^{{{exp}}}"


def latex_escape(text):
    r"""Return ``text`` with LaTeX's special characters (``_ % & # $ { } ~ ^ \``) escaped."""
    return "".join(_ESCAPES.get(c, c) for c in str(text))


def _label_unit(name):
    """LaTeX label (epoch in parentheses) and plain-text unit of a summary name."""
    base, _, epoch = name.partition("@")
    if base in LABELS:
        # the figure labels carry their unit in brackets; the table has a Unit column
        label = re.sub(r"\s+\[[^\]]*\]$", "", LABELS[base])
        if re.fullmatch(r"[A-Za-z]", label):  # a bare symbol ("d") is math italic
            label = f"${label}$"
    elif base in DERIVED:
        label = DERIVED[base][0]
    else:
        label = latex_escape(base)
    unit = UNITS.get(base, DERIVED.get(base, ("", ""))[1])
    return label + (f" ({latex_escape(epoch)})" if epoch else ""), unit


def _interval(stats, suffix=""):
    def get(k):
        x = stats.get(k + suffix)
        return float("nan") if x is None else float(x)
    med, lo, hi = get("median"), get("p16"), get("p84")
    return round_value(med, hi - med, med - lo)


def _rows(summary):
    """``(group, name, stats)`` for parameters first, then derived quantities."""
    return [(g, n, s) for g in ("parameters", "derived")
            for n, s in (summary.get(g) or {}).items()]


def _has_stat(summary):
    return any("median_stat" in s for _, _, s in _rows(summary))


def _grid_text(summary):
    grids = summary.get("grid") or []
    out = []
    for g in grids if isinstance(grids, list) else [grids]:
        # a grid file's name, not the folder it sat in on the author's machine
        name = latex_escape(PurePath(str(g.get("name", "unknown"))).name)
        checksum = g.get("checksum")
        out.append(f"{name} (SHA-256 {latex_escape(checksum[:12])})" if checksum
                   else f"{name} (no checksum)")
    return "Grid: " + (", ".join(out) if out else "not recorded") + "."


def table_note(summary):
    """Return the note under a table: intervals, grid and checksum, convergence verdict."""
    parts = [INTERVAL_NOTE]
    if _has_stat(summary):
        parts.append(STAT_NOTE)
    parts.append(_grid_text(summary))
    parts.append("Sampler: converged." if summary.get("converged")
                 else r"Sampler: \textbf{NOT CONVERGED: do not quote}.")
    return " ".join(parts)


def latex_table(summary, *, style="tabular", caption=None, label=None, star=None):
    r"""Return a LaTeX table of a run's summary (the dict written to summary.json).

    Parameters
    ----------
    summary : dict
    style : {"tabular", "deluxetable"}
        A plain-LaTeX ``table`` float, or AASTeX's ``deluxetable``.
    caption : str, optional
        LaTeX text, used as given. Default: "Posterior summary" with the escaped ``star``
        name and hypothesis.
    label : str, optional
        ``\label`` key (default ``tab:teffmc``).
    star : str, optional
        Plain-text star name for the default caption (escaped).
    """
    if style not in ("tabular", "deluxetable"):
        raise ConfigError(f"should be 'tabular' or 'deluxetable' but got {style!r}",
                          key="style", value=style)
    if caption is None:
        caption = "Posterior summary" + (f" of {latex_escape(star)}" if star else "")
        if summary.get("hypothesis"):
            caption += f", hypothesis {latex_escape(summary['hypothesis'])}"
    label = label or "tab:teffmc"
    stat = _has_stat(summary)
    heads = ["Name", "Value", "Unit"] + (["Stat.\\ only"] if stat else [])
    none = r"\nodata" if style == "deluxetable" else r"\ldots"
    groups = {}
    for group, name, stats in _rows(summary):
        text, unit = _label_unit(name)
        cells = [text, f"${_interval(stats).text}$", LATEX_UNITS.get(unit, latex_escape(unit))]
        if stat:
            cells.append(f"${_interval(stats, '_stat').text}$" if "median_stat" in stats
                         else none)
        groups.setdefault(group, []).append(" & ".join(cells))
    titles = {"parameters": "Fitted parameters", "derived": "Derived quantities"}
    cols = "lcc" + ("c" if stat else "")
    if style == "deluxetable":
        body = []
        for group, rows in groups.items():
            body += [rf"\sidehead{{{titles[group]}}}", *[r + r" \\" for r in rows]]
        body[-1] = body[-1].removesuffix(r" \\")  # a final \\ would add an empty row
        return "\n".join([
            rf"\begin{{deluxetable}}{{{cols}}}",
            rf"\tablecaption{{{caption}\label{{{label}}}}}",
            r"\tablehead{" + " & ".join(rf"\colhead{{{h}}}" for h in heads) + "}",
            r"\startdata", *body, r"\enddata",
            rf"\tablecomments{{{table_note(summary)}}}",
            r"\end{deluxetable}", ""])
    body = []
    for group, rows in groups.items():
        body += [r"\hline", rf"\multicolumn{{{len(heads)}}}{{l}}{{\textit{{{titles[group]}}}}} \\",
                 *[r + r" \\" for r in rows]]
    return "\n".join([
        r"\begin{table}", r"\centering", rf"\caption{{{caption}}}", rf"\label{{{label}}}",
        rf"\begin{{tabular}}{{{cols}}}", r"\hline", " & ".join(heads) + r" \\", *body,
        r"\hline", r"\end{tabular}", "",
        r"\smallskip",
        rf"\parbox{{0.9\linewidth}}{{\footnotesize Note. {table_note(summary)}}}",
        r"\end{table}", ""])


def csv_table(summary):
    """CSV text for supplementary data: name, unit, median, p16, p84, rounded_value.

    Numbers are written in full precision (empty when missing); ``rounded_value`` is the
    median rounded by the module's rule, written with exactly its kept digits (``0.881``,
    ``1.31E+5``). With statistical-only intervals, ``median_stat, p16_stat, p84_stat``
    follow.
    """
    stat = _has_stat(summary)
    keys = ("median", "p16", "p84")
    head = ["name", "unit", *keys, "rounded_value"]
    if stat:
        head += [k + "_stat" for k in keys]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(head)
    for _, name, stats in _rows(summary):
        r = _interval(stats)
        row = [name, _label_unit(name)[1], *[_num(stats.get(k)) for k in keys],
               "" if r.place is None else str(_round(_dec(r.value), r.place))]
        if stat:
            row += [_num(stats.get(k + "_stat")) for k in keys]
        w.writerow(row)
    return buf.getvalue()


def _num(x):
    return "" if x is None or not math.isfinite(x) else repr(float(x))


def _f(x, spec):
    return r"\ldots" if x is None or not math.isfinite(float(x)) else format(float(x), spec)


def compare_latex(rows, *, caption="Comparison of the hypotheses", label="tab:teffmc-compare"):
    """Return a LaTeX table of compare.json's rows.

    elpd_LOO with its standard error, the difference to the best run with the standard
    error of the difference, ln Z when computed, the count of Pareto k > 0.7 and the
    convergence verdict.
    """
    head = (r"Hypothesis & $\mathrm{elpd_{LOO}}$ & $\Delta\mathrm{elpd_{LOO}}$ & "
            r"$\ln Z$ & $N(\hat{k}>0.7)$ & Converged \\")
    body = []
    for r in rows:
        body.append(" & ".join([
            latex_escape(r["run"]),
            f"${_f(r['elpd_loo'], '.1f')} \\pm {_f(r['se'], '.1f')}$",
            f"${_f(r['elpd_diff'], '.1f')} \\pm {_f(r['se_diff'], '.1f')}$",
            f"${_f(r.get('log_z'), '.1f')}$", str(r.get("n_bad_k", 0)),
            "yes" if r.get("converged") else r"\textbf{no}"]) + r" \\")
    note = ("elpd$_\\mathrm{LOO}$: expected log predictive density by PSIS-LOO (higher is "
            "better); differences and their standard errors against the best hypothesis; "
            "$\\ln Z$: nested-sampling evidence (\\ldots\\ when not computed).")
    return "\n".join([r"\begin{table}", r"\centering", rf"\caption{{{caption}}}",
                      rf"\label{{{label}}}", r"\begin{tabular}{lccccc}", r"\hline", head,
                      r"\hline", *body, r"\hline", r"\end{tabular}", "", r"\smallskip",
                      rf"\parbox{{0.9\linewidth}}{{\footnotesize Note. {note}}}",
                      r"\end{table}", ""])


def compare_csv(rows):
    """compare.json's rows as CSV (full precision; empty where not computed)."""
    cols = ["run", "elpd_loo", "se", "elpd_diff", "se_diff", "log_z", "log_z_err",
            "n_points", "n_bad_k", "max_k", "converged"]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for r in rows:
        w.writerow([r.get(c) if c in ("run", "n_points", "n_bad_k", "converged")
                    else _num(r.get(c)) for c in cols])
    return buf.getvalue()


def _survey_value(v):
    if v.get("p16") is None or v.get("p84") is None:
        return round_value(v["median"], None, None).text
    return round_value(v["median"], v["p84"] - v["median"], v["median"] - v["p16"]).text


def survey_latex(rows, names, *, caption="Survey results", label="tab:teffmc-survey"):
    """Return a LaTeX table with one row per star.

    Status and the rounded value of each parameter in ``names`` (``rows`` as
    :func:`teffmc.report.survey.survey_rows` gives, ``vals`` holding a dict with median,
    p16, p84 per name).
    """
    heads = ["Star", "Status"] + [_label_unit(n)[0] + (
        f" ({LATEX_UNITS.get(_label_unit(n)[1], latex_escape(_label_unit(n)[1]))})"
        if _label_unit(n)[1] else "") for n in names]
    body = []
    for r in rows:
        cells = [latex_escape(r["star"]), latex_escape(r["status"].replace("_", " "))]
        for n in names:
            v = r["vals"].get(n)
            cells.append(r"\ldots" if v is None else
                         f"${_survey_value(v)}$")
        body.append(" & ".join(cells) + r" \\")
    note = (INTERVAL_NOTE + " Rows with status ``not converged'' must not be quoted; "
            "``failed'' rows have no run.")
    return "\n".join([r"\begin{table}", r"\centering", rf"\caption{{{caption}}}",
                      rf"\label{{{label}}}", r"\begin{tabular}{ll" + "c" * len(names) + "}",
                      r"\hline", " & ".join(heads) + r" \\", r"\hline", *body, r"\hline",
                      r"\end{tabular}", "", r"\smallskip",
                      rf"\parbox{{0.9\linewidth}}{{\footnotesize Note. {note}}}",
                      r"\end{table}", ""])
