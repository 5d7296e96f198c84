"""report.html (one run, or a comparison) and survey.html (a batch).

Single self-contained pages -- figures embedded as base64 PNG, styles and the
table-sorting script inline, no network -- rendered by jinja2 from
``templates/*.html.j2`` (autoescaped).
"""

import base64
import html as html_mod
import math
import re

from ..parameters import UNITS
from .figures import DERIVED_LABELS
from .latex import DERIVED, round_value

__all__ = ["report_html", "comparison_html", "survey_page", "rounded_html", "env"]


def env():
    """Return the jinja2 environment of the report templates (autoescaped, strict)."""
    import jinja2

    from .methods import TEMPLATES

    e = jinja2.Environment(loader=jinja2.FileSystemLoader(str(TEMPLATES)),
                           autoescape=jinja2.select_autoescape(["html", "j2"]),
                           undefined=jinja2.StrictUndefined, trim_blocks=True,
                           lstrip_blocks=True)
    e.filters["num"] = _num
    e.filters["exact"] = _exact
    e.tests["match"] = lambda text, prefix: str(text).startswith(prefix)
    return e


def _num(x, spec=".4g"):
    return "n/a" if x is None or not math.isfinite(float(x)) else format(float(x), spec)


def _exact(x):
    """Return the full-precision number for a ``data-value`` attribute (as in summary.json)."""
    return "" if x is None else repr(float(x))


def rounded_html(median, p16, p84):
    """Return the value with asymmetric errors, rounded by the paper tables' rule, as HTML."""
    if None in (median, p16, p84):
        return "n/a"
    text = round_value(median, p84 - median, median - p16).text
    t = html_mod.escape(text)
    t = re.sub(r"\^\{\+([^}]*)\}_\{-([^}]*)\}", r"<sup>+\1</sup><sub>−\2</sub>", t)
    t = t.replace(r"\pm", "±").replace(r"\cdots", "…")
    t = re.sub(r"\\times 10\^\{(-?\d+)\}", r"× 10<sup>\1</sup>", t)
    return t


HTML_UNITS = {"um": "µm", "W m^-2": "W m⁻²", "R_sun": "R☉", "L_sun": "L☉"}


def _unit(name):
    base = name.partition("@")[0]
    unit = UNITS[base] if base in UNITS else DERIVED.get(
        base, DERIVED_LABELS.get(base, ("", "")))[1]
    return HTML_UNITS.get(unit, unit)


def _rows(summary):
    out = []
    for group in ("parameters", "derived"):
        for name, s in (summary.get(group) or {}).items():
            out.append({"group": group, "name": name, "unit": _unit(name), "s": s,
                        "rounded": rounded_html(s.get("median"), s.get("p16"), s.get("p84"))})
    return out


def _b64(images):
    return {k: base64.b64encode(v).decode("ascii") for k, v in images.items()}


def report_html(*, summary, record, log_text, images, captions, comparison=None,
                methods_md=None):
    """Render report.html of one run.

    Verdict and cautions first (with the goodness of fit), the parameter table, the
    figures, the diagnostics, the methods, the provenance.
    """
    t = record.get("teffmc", {})
    gof = summary.get("goodness_of_fit") or {}
    bad_fit = [k for k, g in gof.items() if g.get("chi2_nu") is not None
               and g["chi2_nu"] > 2.0]
    main_figs = [k for k in ("fit", "corner", "hypotheses", "budget", "delta_teff")
                 if k in images]
    return env().get_template("report.html.j2").render(
        title=record.get("name") or "teffmc run", summary=summary, rows=_rows(summary),
        gof=gof, bad_fit=bad_fit, images=_b64(images), captions=captions,
        main_figs=main_figs, comparison=comparison["rows"] if comparison else None,
        methods=_paragraphs(methods_md) if methods_md else [], teffmc=t,
        versions=t.get("versions", {}), provenance=t.get("provenance", {}),
        log_tail=(log_text or "").splitlines()[-12:], links={})


def comparison_html(*, comparison, images, captions, links):
    """Render report.html of a folder of hypotheses.

    The comparison, its figures and links to each hypothesis's own report.
    """
    first = comparison["runs"][0][1]
    return env().get_template("report.html.j2").render(
        title=first.attrs.get("title", "comparison"), summary=None, rows=[], gof={},
        bad_fit=[], images=_b64(images), captions=captions, main_figs=list(images),
        comparison=comparison["rows"], methods=[], teffmc={}, versions={}, provenance={},
        log_tail=[], links=links)


def _paragraphs(md):
    """methods.md as paragraphs of plain text (bold headings kept), HTML-escaped later."""
    out = []
    for block in re.split(r"\n\s*\n", md):
        block = re.sub(r"<!--.*?-->", "", block, flags=re.S).strip()
        if not block:
            continue
        m = re.match(r"\*\*(.+?)\*\*\s*(.*)", block, flags=re.S)
        head, body = (m.group(1), m.group(2)) if m else ("", block)
        out.append({"head": head, "body": body.replace("\\_", "_").replace("\\*", "*")})
    return out


def survey_page(*, rows, columns, images, title):
    """survey.html: one sortable row per star and the summary plots."""
    return env().get_template("survey.html.j2").render(rows=rows, columns=columns,
                                                       images=_b64(images), title=title)
