"""The methods paragraph (methods.tex, methods.md) and references.bib of a run.

Built from the run's own files only -- run.toml (the resolved config and
``[teffmc.provenance]``: data, grid, model, sampler, stop rule), summary.json (steps,
burn-in, thinning, achieved R-hat and ESS, goodness of fit) and, for a comparison, the
rows of compare.json -- through one jinja2 template (``templates/methods.j2``) rendered
twice, with LaTeX or Markdown filters, so the two texts say the same. What the model
paragraph says about each model component is the component's own sentence
(``METHODS`` / ``METHODS_OFF``, :mod:`teffmc.components`), rendered in the same context.
"""

import math
from dataclasses import fields
from pathlib import Path, PurePath

from ..components import COMPONENTS
from ..config_spec import ModelSpec
from ..parameters import UNITS, WORDS
from .bibliography import LAW_KEYS, bibtex, short_cite
from .latex import DERIVED, latex_escape

__all__ = ["methods_context", "render_methods", "references", "prior_text", "achieved"]

TEMPLATES = Path(__file__).with_name("templates")
PLAIN_UNITS = {"um": "µm", "km/s": "km/s", "": ""}
NAMES = WORDS   # declared by teffmc.components (and the grid's nuisances)


def _g(x):
    """Format a number as given in the config: 3000.0 -> 3000, 0.05 -> 0.05."""
    x = float(x)
    return f"{x:.0f}" if x == round(x) and abs(x) < 1e15 else f"{x:.6g}"


def prior_text(prior, unit=""):
    """Return plain words for one prior of run.toml.

    ``prior`` is ``{"dist": "uniform", "low": ..}`` or ``{"fixed": v}``.
    """
    u = f" {PLAIN_UNITS.get(unit, unit)}" if PLAIN_UNITS.get(unit, unit) else ""
    if "fixed" in prior:
        return f"fixed at {_g(prior['fixed'])}{u}"
    kind = prior["dist"]
    if kind in ("uniform", "loguniform"):
        word = "uniform" if kind == "uniform" else "log-uniform"
        return f"{word} between {_g(prior['low'])} and {_g(prior['high'])}{u}"
    if kind == "normal":
        return f"normal with mean {_g(prior['mean'])} and standard deviation {_g(prior['sd'])}{u}"
    return (f"normal with mean {_g(prior['mean'])} and standard deviation {_g(prior['sd'])}"
            f", truncated to {_g(prior['low'])}-{_g(prior['high'])}{u}")


def achieved(summary):
    """Return the worst R-hat and smallest bulk and tail ESS over the sampled parameters.

    ``{"r_hat": (value, name), "ess_bulk": ..., "ess_tail": ...}`` (None when no
    parameter has them).
    """
    out = {}
    for key, pick in (("r_hat", max), ("ess_bulk", min), ("ess_tail", min)):
        vals = [(s[key], n) for n, s in (summary.get("parameters") or {}).items()
                if s.get(key) is not None and math.isfinite(s[key])]
        out[key] = pick(vals) if vals else None
    return out


def _priors(record):
    t = record.get("teffmc", {})
    rows = []
    for name, p in (t.get("priors") or {}).items():
        base, _, ep = name.partition("@")
        rows.append({"name": name, "what": NAMES.get(base, base) + (f" ({ep})" if ep else ""),
                     "text": prior_text(p, UNITS.get(base, ""))})
    fixed = [{"name": n, "what": NAMES.get(n.partition("@")[0], n.partition("@")[0])
              + (f" ({n.partition('@')[2]})" if "@" in n else ""),
              "text": f"fixed at {_g(v)}"} for n, v in (t.get("fixed") or {}).items()]
    for key, unit in (("distance_pc", "pc"), ("parallax_mas", "mas")):
        if isinstance(record.get(key), dict):
            rows.append({"name": key, "what": "distance" if key == "distance_pc" else "parallax",
                         "text": prior_text(record[key], unit)})
    return rows, fixed


def methods_context(record, summary, *, comparison=None, star=None):
    """Everything the template says, from run.toml (``record``, parsed) and summary.json."""
    t = record.get("teffmc", {})
    prov = t.get("provenance", {})
    model = prov.get("model", {})
    sampler = prov.get("sampler", {})
    versions = t.get("versions", {})
    sgrid = summary.get("grid") if isinstance(summary.get("grid"), dict) else {}
    name = t.get("grid", sgrid.get("name", "not recorded"))
    grid = {"name": name, "label": PurePath(str(name)).stem,
            "checksum": t.get("grid_checksum", sgrid.get("checksum", "not recorded")),
            "provenance": {}, "nuisance": [], **prov.get("grid", {})}
    # the grid file's name, not the folder it sat in on the author's machine
    grid = {**grid, "name": PurePath(str(grid.get("name", "?"))).name}
    priors, fixed = _priors(record)
    data = prov.get("data", [])
    mism = sorted({d.get("mismatch", "none") for d in data if d.get("kind") == "spectrum"})
    cal = sorted({d.get("calibration_order", -1) for d in data if d.get("kind") == "spectrum"})
    law = model.get("extinction_law", "CCM89")
    ev = summary.get("evidence")
    derived = [n for n in (summary.get("derived") or {}) if n.partition("@")[0] in DERIVED]
    return {
        "star": star or record.get("name") or "the star",
        "hypothesis": summary.get("hypothesis"),
        "data": data, "grid": grid, "model": model, "law": law,
        "law_key": LAW_KEYS.get(law), "mismatch": mism, "calibration": cal,
        "priors": priors, "fixed": fixed, "sampler": sampler,
        "shared": prov.get("shared", []),
        "summary": summary, "achieved": achieved(summary),
        "gof": summary.get("goodness_of_fit") or {}, "evidence": ev,
        "comparison": comparison or [], "versions": versions,
        "derived": derived,
        "photometry": any(d.get("kind") == "photometry" for d in data),
        "components": component_sentences(model),
    }


def recorded_model(model):
    """Return the run's recorded model (run.toml's dict) as a ModelSpec.

    Keys the ModelSpec does not know are left out, and the ones the record lacks (a run
    of an earlier version) take their defaults.
    """
    known = {f.name for f in fields(ModelSpec)}
    return ModelSpec(**{k: tuple(v) if isinstance(v, list) else v
                        for k, v in model.items() if k in known})


def component_sentences(model):
    """Return each component's sentence for a run's recorded model, registry order.

    ``METHODS`` of the components the model has (``active``), ``METHODS_OFF`` of those
    it has not; template fragments rendered with the methods text (:func:`render_methods`).
    """
    spec = recorded_model(model)
    out = []
    for c in COMPONENTS:
        text = getattr(c, "METHODS" if c.active(spec) else "METHODS_OFF", "")
        if text:
            out.append(text)
    return out


def _md_escape(s):
    return str(s).replace("*", r"\*").replace("_", r"\_")


def _cite_md(keys):
    keys = [keys] if isinstance(keys, str) else list(keys)
    return "(" + "; ".join(short_cite(k) for k in keys) + ")"


def _cite_tex(keys):
    keys = [keys] if isinstance(keys, str) else list(keys)
    return r"\citep{" + ",".join(keys) + "}"


def render_methods(ctx, fmt):
    """Render the methods text in ``fmt`` ("tex" or "md") from :func:`methods_context`.

    Returns ``(text, cited keys)``: the BibTeX keys it cites, in order.
    """
    import jinja2

    cited = []

    def cite(keys, fmt_fn):
        keys = [keys] if isinstance(keys, str) else list(keys)
        cited.extend(keys)
        return fmt_fn(keys)

    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(TEMPLATES)),
                             undefined=jinja2.StrictUndefined, trim_blocks=True,
                             lstrip_blocks=True, keep_trailing_newline=True,
                             autoescape=False)
    tex = fmt == "tex"
    env.filters["e"] = latex_escape if tex else _md_escape
    env.filters["code"] = (lambda s: r"\texttt{" + latex_escape(s) + "}") if tex else (
        lambda s: f"`{s}`")
    # evaluated at render time (a plain filter on a constant would be folded at compile
    # time, recording the keys of branches that are never rendered)
    env.filters["cite"] = jinja2.pass_context(
        lambda _ctx, k: cite(k, _cite_tex if tex else _cite_md))
    env.filters["g"] = _g
    env.globals.update(tex=tex, pct=r"\%" if tex else "%",
                       sigma=r"$\sigma$" if tex else "σ", tau=r"$\tau$" if tex else "τ",
                       rhat=r"$\hat{R}$" if tex else "R-hat", chi2=r"$\chi^2/\nu$" if tex
                       else "χ²/ν", approx=r"$\approx$" if tex else "≈",
                       times=r"$\times$" if tex else "×", lt=r"$<$" if tex else "<",
                       gt=r"$>$" if tex else ">", AA=r"\AA{}" if tex else "Å",
                       pm=r"$\pm$" if tex else "±", mu=r"$\mu$" if tex else "µ",
                       teff=r"$T_\mathrm{eff}$" if tex else "Teff",
                       av=r"$A_V$" if tex else "A_V", rv=r"$R_V$" if tex else "R_V",
                       matern=r"Mat\'ern" if tex else "Matérn",
                       minus=r"$-$" if tex else " − ", sub_s=r"$_s$" if tex else "s")
    # a component's sentence is a template fragment, rendered in the same context
    env.globals["fragment"] = jinja2.pass_context(
        lambda context, src: env.from_string(src).render(context.get_all()))
    text = env.get_template("methods.j2").render(**ctx)
    return text, list(dict.fromkeys(cited))


def references(ctx, keys):
    """references.bib text for the ``keys`` the methods cite."""
    v = ctx["versions"]
    return bibtex(keys, versions={"miepython": v.get("miepython"),
                                         "speclite": v.get("speclite")})
