"""The parameter declarations of the model components and the tables built from them."""

import math
import re

import pytest

from teffmc import parameters as P
from teffmc.budget import GROUPS
from teffmc.components import COMPONENTS, Param, active_parameters, all_parameters
from teffmc.config import ModelSpec

BOUNDS = {"teff": (2600.0, 4500.0), "logg": (-1.0, 5.0), "mh": (-1.0, 0.5)}
FULL = ModelSpec(veil="mie", scattering=True, patches=True, mismatch_terms=("correlated",))


def test_every_parameter_declared_once_with_unit_and_label():
    names = [p.name for c in COMPONENTS for p in c.PARAMETERS]
    assert len(names) == len(set(names))
    for p in all_parameters().values():
        assert isinstance(p, Param) and p.label and p.unit is not None
        assert p.words and P.WORDS[p.name] == p.words   # the methods text's name


def test_default_priors_respect_the_limits():
    # a default prior outside a parameter's own limits would be refused by the config
    # check: every default of the fullest model variant passes it
    for name, prior in P.model_parameters(FULL, BOUNDS).items():
        lim = P.parameter_limits(name, FULL)
        if lim is None:
            continue
        lo, hi = prior.support
        assert lim[0] <= lo and hi <= lim[1], (name, prior, lim)
        if name in P.POSITIVE:
            assert lo > 0, name


def test_vector_layout_unchanged():
    # the order of the sampled vector (and so of every stored draw) is the one runs had
    # before the components declared their parameters
    assert list(P.model_parameters(FULL, BOUNDS)) == [
        "teff", "logg", "mh", "theta", "a_v", "r_v", "jitter", "veil_tau", "veil_cover",
        "grain_radius", "veil_scatter", "mismatch_amp", "mismatch_scale", "mismatch_white",
        "patch_cover", "patch_dteff"]
    plain = ModelSpec(mismatch_terms=())
    assert list(P.model_parameters(plain, BOUNDS)) == [
        "teff", "logg", "mh", "theta", "a_v", "r_v", "jitter"]


@pytest.mark.parametrize("model, present, absent", [
    (ModelSpec(veil="grey", mismatch_terms=()), {"veil_tau", "veil_cover"},
     {"grain_radius", "veil_scatter", "patch_cover", "mismatch_amp"}),
    (ModelSpec(veil="mie", mismatch_terms=("white",)), {"grain_radius", "mismatch_amp"},
     {"veil_scatter", "mismatch_scale", "mismatch_white"}),
])
def test_active_follows_the_model(model, present, absent):
    names = set(active_parameters(model))
    assert present <= names and not (absent & names)


def test_tables_built_from_the_declarations():
    decl = all_parameters()
    assert set(P.DEFAULT_SHARED) == {n for n, d in decl.items() if d.shared} | set(
        P.NUISANCE_PARAMETERS)
    grouped = {n for g in GROUPS.values() for n in g}
    assert grouped == {n for n, d in decl.items() if d.group}
    assert GROUPS["radius"] == ("theta",)
    for n, d in decl.items():
        assert P.UNITS[n] == d.unit and P.LABELS[n] == d.label
    assert P.LIMITS["veil_cover"][:2] == (0.0, 1.0)
    assert P.LIMITS["a_v"][:2] == (0.0, math.inf)


def test_every_component_file_is_registered():
    # a component is its file plus its name in REGISTRY (common practice, no source):
    # a file left out of the registry would declare nothing and evaluate nothing
    from pathlib import Path

    from teffmc.components import REGISTRY

    folder = Path(COMPONENTS[0].__file__).parent
    files = {f.stem for f in folder.glob("*.py")} - {"__init__", "base"}
    assert set(REGISTRY) == files and len(REGISTRY) == len(set(REGISTRY))
    assert [c.__name__.rpartition(".")[2] for c in COMPONENTS] == list(REGISTRY)


def test_model_dependent_limits_are_declared_by_the_components(monkeypatch):
    # R_V's limits are the law's calibrated range (dust_extinction's Rv_range), the grain
    # radius's the optics table's (teffmc.dust.mietable.RADIUS_RANGE); both are declared
    # as a ``limits(model)`` hook of the Param, and parameter_limits only asks the hook
    from dataclasses import replace

    from teffmc.components import declared
    from teffmc.dust.extinction import LAWS, law_ranges
    from teffmc.dust.mietable import RADIUS_RANGE

    for law in LAWS:
        m = ModelSpec(extinction_law=law)
        lo, hi, why = P.parameter_limits("r_v", m)
        assert (lo, hi) == law_ranges(law)[1] and law in why
        assert declared("r_v").limits(m) == (lo, hi, why)
    assert P.parameter_limits("grain_radius", FULL)[:2] == RADIUS_RANGE
    # any parameter's hook is used, in place of its fixed limits
    hooked = replace(declared("a_v"), limits=lambda model: (1.0, 2.0, model.veil))
    monkeypatch.setitem(P._DECL, "a_v", hooked)
    assert P.parameter_limits("a_v", FULL) == (1.0, 2.0, "mie")


def test_corner_order_comes_from_the_declarations():
    # the corner plot's order (physical parameters first, in the order the figure had
    # when it was a hand-written list; common practice, no source) is each parameter's
    # declared corner_rank; undeclared ones follow in the sampled order
    from teffmc.report.figures import CORNER_MAX, corner_order

    before = ["teff", "a_v", "theta", "veil_tau", "grain_radius", "veil_cover", "r_v", "logg",
              "mh", "patch_cover", "patch_dteff"]
    ranked = sorted(P.CORNER_RANK, key=P.CORNER_RANK.get)
    assert ranked[:len(before)] == before and set(ranked) <= set(all_parameters())
    names = list(P.model_parameters(FULL, BOUNDS))
    assert corner_order(names) == before[:CORNER_MAX]
    # epochs side by side; unranked (jitter, nuisance) after the ranked, in their order
    names = ["jitter", "tio_scale", "teff@late", "mh", "teff@early", "patch_cover"]
    assert corner_order(names) == ["teff@late", "teff@early", "mh", "patch_cover",
                                   "jitter", "tio_scale"]


def _methods(model, fmt="md"):
    from teffmc.report.methods import methods_context, render_methods

    record = {"teffmc": {"provenance": {"model": model}, "versions": {"miepython": "3.0"}}}
    return render_methods(methods_context(record, {}), fmt)


def _recorded(**kw):
    # a model as run.toml records it (teffmc.provenance: every ModelSpec field)
    return {k: list(v) if isinstance(v, tuple) else v for k, v in vars(ModelSpec(**kw)).items()}


def test_methods_text_takes_each_components_sentence():
    # the model paragraph is the components' own METHODS (or METHODS_OFF) sentences;
    # a grey veil is not described as Mie grains (dust/veil.py: tau independent of
    # wavelength, no scattering) and cites no Mie code
    grey, keys = _methods(_recorded(veil="grey"))
    assert "grey dust" in grey and "Mie" not in grey and "miepython" not in keys
    mie, keys = _methods(_recorded(veil="mie", grain_material="carbon", scattering=True))
    assert "Mie theory" in mie and "carbon grains" in mie and "miepython" in keys
    assert "cone of 90 degrees is added" in mie
    assert "No circumstellar veil is included." in _methods(_recorded())[0]
    text = _methods(_recorded(patches=True, switches=("spots",)))[0]
    assert "Cool surface patches are included" in text and "Hot surface spots" in text
    assert text.index("Interstellar extinction") < text.index("Cool surface patches") \
        < text.index("Hot surface spots")          # registry order
    # LaTeX: outside math, every underscore and percent sign escaped
    tex = _methods(_recorded(veil="mie", patches=True, switches=("spots",)), "tex")[0]
    model = tex.split(r"\paragraph{Model.}")[1].split(r"\paragraph{Priors.}")[0]
    plain = re.sub(r"\$[^$]*\$", "", model)
    assert not re.search(r"(?<!\\)[_%&#]", plain), plain


def test_a_new_components_sentence_needs_no_template_edit(monkeypatch):
    # a component's METHODS is a template fragment with the methods text's symbols and
    # filters: adding a component adds its sentence without touching methods.j2
    import types

    from teffmc.report import methods

    fake = types.SimpleNamespace(active=lambda m: m.veil == "grey",
                                 METHODS="A test term of depth {{ tau }} is included.",
                                 METHODS_OFF="No test term.")
    monkeypatch.setattr(methods, "COMPONENTS", (*COMPONENTS, fake))
    assert "A test term of depth τ is included." in _methods(_recorded(veil="grey"))[0]
    off = _methods(_recorded(), "tex")[0]
    assert "No test term." in off and "A test term" not in off
