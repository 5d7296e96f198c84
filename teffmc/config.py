"""The run configuration: TOML into frozen dataclasses, validated.

Every problem raises :class:`~teffmc.errors.ConfigError` naming the file, the key
(dotted path, e.g. ``priors.teff.low``) and the bad value. Relative data paths are
resolved against the folder of the config file.
"""

import tomllib
from dataclasses import replace
from pathlib import Path

from scipy import special

from .components import SWITCHES
from .config_spec import (
    DEFAULT_MISMATCH,
    REPORT_FORMATS,
    Config,
    Epoch,
    ModelSpec,
    SamplerSpec,
    SpectrumSpec,
)
from .dust.extinction import LAWS
from .dust.materials import MATERIALS
from .errors import ConfigError
from .parameters import DEFAULT_SHARED
from .priors import PRIOR_KINDS, Prior
from .tomlread import TableReader as _Reader

__all__ = ["Config", "Epoch", "SpectrumSpec", "ModelSpec", "SamplerSpec", "load_config",
           "parse_config"]

VEILS = ("none", "grey", "mie")
#: model-mismatch term of a spectrum (teffmc.likelihood.mismatch); the default
#: (config_spec.DEFAULT_MISMATCH) is the one a careful user wants for a real star: no
#: grid reproduces it pixel by pixel
MISMATCH_KINDS = ("none", "white", "correlated")
SEED_LIMIT = 2**63          # [sampler] seed: 0 <= seed < 2**63 (a signed 64-bit integer)
MIN_POSITIVE_MASS = 1e-3    # the least prior probability above 0 of a distance or parallax


def _prior(r: _Reader, k):
    t = r.sub(k)
    if t is None:
        return None
    if "fixed" in t.table:
        v = t.get("fixed", float)
        t.done()
        return Prior("fixed", value=v)
    kind = t.choice("dist", tuple(PRIOR_KINDS), None)
    args = {a: t.get(a, float, required=True) for a in PRIOR_KINDS[kind]}
    t.done()
    try:
        return Prior(kind, **args)
    except ValueError as exc:
        raise r.err(k, str(exc), args) from None


def _mostly_positive(r: _Reader, k, prior):
    """Refuse a normal distance or parallax prior with almost nothing above 0.

    Such a prior is used truncated at 0 (the derived quantities draw its positive part).
    """
    if prior is None or prior.kind != "normal":
        return
    above = float(special.ndtr(prior.mean / prior.sd))
    if above < MIN_POSITIVE_MASS:
        raise r.err(k, f"should be > 0 but the normal prior (mean {prior.mean:g}, sd "
                    f"{prior.sd:g}) puts only {above:.2g} of its probability above 0 (at "
                    f"least {MIN_POSITIVE_MASS:g} needed)", prior.to_dict())


def _cone_deg(r: _Reader, default):
    """Half-angle of the veil's forward cone [degree], in (0, 90]."""
    v = r.positive("scatter_cone_deg", default)
    if v is not None and v > 90.0:
        raise r.err("scatter_cone_deg", f"should be in (0, 90] but got {v}", v)
    return v


def _columns(r: _Reader):
    """``columns = {wave = ..., flux = ..., err = ..., use = ..., mask = ...}``."""
    t = r.sub("columns")
    if t is None:
        return ()
    out = tuple((role, v) for role in ("wave", "flux", "err", "use", "mask")
                if (v := t.get(role, str)) is not None)
    t.done()
    return out


def _spectrum(r: _Reader, base):
    s = SpectrumSpec(
        file=r.path("file", base, required=True),
        air=r.get("air", bool, None),
        resolution=r.positive("resolution"),
        fwhm_A=r.positive("fwhm_A"),
        wave_range=_range(r, "wave_range"),
        mask=tuple(_range(r, f"mask[{i}]", v) for i, v in enumerate(r.get("mask", list, []))),
        telluric_mask=r.get("telluric_mask", bool, True),
        calibration_order=r.get("calibration_order", int, -1),
        calibration_sigma=r.positive("calibration_sigma", 0.2),
        rv_kms=r.get("rv_kms", float, 0.0),
        wave_unit=r.get("wave_unit", str),
        flux_unit=r.get("flux_unit", str),
        columns=_columns(r),
        mismatch=(r.choice("mismatch", MISMATCH_KINDS, None) if "mismatch" in r.table
                  else None),   # None: the default for the likelihood, set in parse_config
    )
    if s.resolution is not None and s.fwhm_A is not None:
        raise r.err("fwhm_A", "give resolution or fwhm_A, not both", s.fwhm_A)
    if not -1 <= s.calibration_order <= 10:
        raise r.err("calibration_order", f"should be in [-1, 10] but got {s.calibration_order}",
                    s.calibration_order)
    r.done()
    return s


def _range(r: _Reader, k, value=None):
    v = r.get(k, list) if value is None else value
    if v is None:
        return None
    ok = (isinstance(v, list) and len(v) == 2
          and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v))
    if not ok or not v[0] < v[1]:
        raise r.err(k, f"should be [low, high] in Angstrom with low < high but got {v!r}", v)
    return (float(v[0]), float(v[1]))


def _epoch(r: _Reader, base, index):
    label = r.get("label", str, "obs" if index == 0 else f"epoch{index + 1}")
    if not label.isidentifier():
        raise r.err("label", f"should be a simple name (letters, digits, _) but got {label!r}",
                    label)
    specs = r.get("spectra", list, [])
    spectra = []
    for i, t in enumerate(specs):
        if not isinstance(t, dict):
            raise r.err(f"spectra[{i}]", f"should be a table but got {t!r}", t)
        spectra.append(_spectrum(_Reader(r.file, t, f"{r.key('spectra')}[{i}]."), base))
    phot = r.path("photometry", base)
    if not spectra and phot is None:
        raise r.err("spectra", "an epoch needs at least one spectrum or a photometry file")
    r.done()
    return Epoch(label=label, spectra=tuple(spectra), photometry=phot)


def _grids(top, base):
    """``grid = "name" | "file" | [...]``: the grids' names or resolved paths."""
    grid = top.get("grid", (str, list), "builtin")
    names = grid if isinstance(grid, list) else [grid]
    if not names:
        raise top.err("grid", "should name at least one grid", grid)
    grids = []
    for i, g in enumerate(names):
        key = f"grid[{i}]" if isinstance(grid, list) else "grid"
        if not isinstance(g, str):
            raise top.err(key, f"should be a grid name or file but got {g!r}", g)
        if g not in ("builtin", "blackbody"):
            gp = Path(g).expanduser()
            gp = gp if gp.is_absolute() else base / gp
            if not gp.exists():
                raise top.err(key, f"grid file not found: {gp}", g)
            g = str(gp)
        grids.append(g)
    if len(set(grids)) != len(grids):
        raise top.err("grid", f"lists a grid twice: {names}", names)
    return grids, names


def _model(m):
    model = ModelSpec(
        extinction_law=m.choice("extinction_law", tuple(LAWS), "CCM89"),
        veil=m.choice("veil", VEILS, "none"),
        grain_material=m.choice("grain_material", tuple(MATERIALS), "silicate"),
        grain_spread_dex=m.get("grain_spread_dex", float, 0.1),
        scattering=m.get("scattering", bool, False),
        scatter_cone_deg=_cone_deg(m, 90.0),
        patches=m.get("patches", bool, False),
        likelihood=m.choice("likelihood", ("gaussian", "student_t"), "gaussian"),
        student_nu=m.positive("student_nu", 4.0),
        interp_error=m.get("interp_error", bool, False),
        grid_nuisance=m.get("grid_nuisance", bool, True),
        switches=tuple(k for k in SWITCHES if m.get(k, bool, False)),
    )
    if not 0 <= model.grain_spread_dex <= 1:
        raise m.err("grain_spread_dex", f"should be in [0, 1] but got {model.grain_spread_dex}",
                    model.grain_spread_dex)
    m.done()
    return model


def _epochs(top, base, model, path):
    """Read the epochs, with each spectrum's mismatch default set.

    Returns them and the model with the kinds of mismatch term in use.
    """
    epochs_raw = top.get("epoch", list, None, required=True)
    if not epochs_raw:
        raise top.err("epoch", "is empty: give at least one [[epoch]] table with a spectrum "
                      "or a photometry file", epochs_raw)
    epochs = []
    for i, t in enumerate(epochs_raw):
        if not isinstance(t, dict):
            raise top.err(f"epoch[{i}]", f"should be a table but got {t!r}", t)
        epochs.append(_epoch(_Reader(str(path), t, f"epoch[{i}]."), base, i))
    labels = [e.label for e in epochs]
    if len(set(labels)) != len(labels):
        raise top.err("epoch", f"epoch labels must be unique but got {labels}", labels)
    # the default mismatch term: correlated for the Gaussian likelihood; the Student-t
    # likelihood (robust, independent pixels) has none
    default = "none" if model.likelihood == "student_t" else DEFAULT_MISMATCH
    epochs = [replace(e, spectra=tuple(replace(s, mismatch=s.mismatch or default)
                                       for s in e.spectra)) for e in epochs]
    terms = {s.mismatch for e in epochs for s in e.spectra} - {"none"}
    return epochs, replace(model, mismatch_terms=tuple(sorted(terms)))


def _sampler(s):
    if "checkpoint_every" in s.table:  # accepted (and ignored) by earlier versions
        raise s.err("checkpoint_every", "is not a setting: the checkpoint is written after "
                    "every check_every steps (set check_every)", s.table["checkpoint_every"])
    sampler = SamplerSpec(**{
        k: s.get(k, bool if k == "evidence" else int, getattr(SamplerSpec, k))
        for k in SamplerSpec.__dataclass_fields__})
    for k in ("n_walkers", "max_steps", "check_every", "n_starts", "nlive"):
        if getattr(sampler, k) <= 0:
            raise s.err(k, f"should be > 0 but got {getattr(sampler, k)}", getattr(sampler, k))
    # a default min_steps above a small max_steps is the usual short test run (it ends
    # "not converged"); one the user wrote above max_steps could never be honoured
    if "min_steps" in s.table and not 0 <= sampler.min_steps <= sampler.max_steps:
        raise s.err("min_steps", f"should be in [0, max_steps = {sampler.max_steps}] but got "
                    f"{sampler.min_steps}", sampler.min_steps)
    if not 0 <= sampler.seed < SEED_LIMIT:  # a signed 64-bit integer, whatever reads it
        raise s.err("seed", f"should be an integer with 0 <= seed < 2**63 but got "
                    f"{sampler.seed}", sampler.seed)
    s.done()
    return sampler


def _report_formats(top):
    """Read ``[report] formats``: the report files each run writes (default: all)."""
    r = top.sub("report")
    if r is None:
        return REPORT_FORMATS
    formats = r.get("formats", list, list(REPORT_FORMATS))
    bad = [f for f in formats if f not in REPORT_FORMATS]
    if bad or len(set(formats)) != len(formats):
        raise r.err("formats", f"should list distinct formats among {', '.join(REPORT_FORMATS)}"
                    f" but got {formats!r}", formats)
    r.done()
    return tuple(formats)


def _distance(top):
    """Read the distance or parallax prior (at most one of them)."""
    distance = _prior(top, "distance_pc")
    parallax = _prior(top, "parallax_mas")
    _mostly_positive(top, "distance_pc", distance)
    _mostly_positive(top, "parallax_mas", parallax)
    if parallax is not None:
        if distance is not None:
            raise top.err("parallax_mas", "give distance_pc or parallax_mas, not both")
        lo = parallax.support[0]
        if lo <= 0 and parallax.kind != "normal":
            raise top.err("parallax_mas", f"should be > 0 but the prior reaches {lo}", lo)
    if distance is not None and distance.support[0] <= 0 and distance.kind != "normal":
        raise top.err("distance_pc", f"should be > 0 but the prior reaches "
                      f"{distance.support[0]:g}", distance.support[0])
    return distance, parallax


def _hypothesis(h, t):
    """One ``[[hypothesis]]`` table: its name and the model settings it overrides."""
    hname = h.get("name", str, required=True)
    if not hname.isidentifier():
        raise h.err("name", f"should be a simple name (letters, digits, _) but got {hname!r}",
                    hname)
    over = {}
    for k in ("veil", "grain_material", "extinction_law", "likelihood"):
        if k in t:
            allowed = {"veil": VEILS, "likelihood": ("gaussian", "student_t"),
                       "grain_material": tuple(MATERIALS),
                       "extinction_law": tuple(LAWS)}[k]
            over[k] = h.choice(k, allowed, None)
    for k in ("scattering", "patches"):
        if k in t:
            over[k] = h.get(k, bool)
    sw = {k: h.get(k, bool) for k in SWITCHES if k in t}   # declared components
    if sw:
        over["switches"] = sw
    if "scatter_cone_deg" in t:
        over["scatter_cone_deg"] = _cone_deg(h, None)
    h.done()
    return hname, over


def _check_likelihoods(path, model, hyps, epochs):
    """Refuse a Student-t likelihood with a calibration polynomial or a mismatch term."""
    calibrated = any(s.calibration_order >= 0 for e in epochs for s in e.spectra)
    for where, lik in [("model.likelihood", model.likelihood)] + [
            (f"hypothesis[{i}].likelihood", o.get("likelihood")) for i, (_, o) in enumerate(hyps)]:
        if lik == "student_t" and calibrated:
            raise ConfigError("the Student-t likelihood cannot marginalise a calibration "
                              "polynomial; set calibration_order = -1 or use gaussian",
                              file=str(path), key=where, value=lik)
        if lik == "student_t" and model.mismatch_terms:
            raise ConfigError("the Student-t likelihood has no mismatch term; set mismatch = "
                              "\"none\" in every spectrum or use gaussian",
                              file=str(path), key=where, value=lik)


def parse_config(table, path="<config>"):
    """Validate a parsed TOML table; ``path`` is used for messages and relative paths."""
    path = Path(path)
    base = path.parent if path.name else Path(".")
    top = _Reader(str(path), table)
    name = top.get("name", str, path.stem)
    grids, grid_names = _grids(top, base)
    model = _model(top.sub("model") or _Reader(str(path), {}, "model."))
    epochs, model = _epochs(top, base, model, path)
    shared = tuple(top.get("shared", list, list(DEFAULT_SHARED)))
    for s in shared:
        if not isinstance(s, str):
            raise top.err("shared", f"should list parameter names but got {s!r}", s)
    pr = top.sub("priors") or _Reader(str(path), {}, "priors.")
    priors = {k: _prior(pr, k) for k in list(pr.table)}
    pr.done()
    sampler = _sampler(top.sub("sampler") or _Reader(str(path), {}, "sampler."))
    distance, parallax = _distance(top)
    report_formats = _report_formats(top)
    hyps = []
    for i, t in enumerate(top.get("hypothesis", list, [])):
        if not isinstance(t, dict):
            raise top.err(f"hypothesis[{i}]", f"should be a table but got {t!r}", t)
        hyps.append(_hypothesis(_Reader(str(path), t, f"hypothesis[{i}]."), t))
    if len({n for n, _ in hyps}) != len(hyps):
        raise top.err("hypothesis", "hypothesis names must be unique", [n for n, _ in hyps])
    _check_likelihoods(path, model, hyps, epochs)
    top.done()
    if len(grids) > 1 and hyps:
        raise top.err("grid", "several grids and several hypotheses in one config are not "
                      "supported: fit the hypotheses with one grid at a time", grid_names)
    return Config(path=path, name=name, grid=grids[0], grids=tuple(grids),
                  epochs=tuple(epochs), model=model, priors=priors, shared=shared,
                  sampler=sampler, distance_pc=distance, parallax_mas=parallax,
                  hypotheses=tuple(hyps), raw=table, report_formats=report_formats)


def load_config(path):
    """Read and validate a TOML config file."""
    path = Path(path)
    if not path.exists():
        raise ConfigError(f"config file not found: {path}", file=str(path))
    try:
        table = tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"not valid TOML ({exc})", file=str(path)) from None
    except OSError as exc:  # a folder, no permission, ...
        raise ConfigError(f"cannot read the config file ({exc.strerror or exc})",
                          file=str(path)) from None
    return parse_config(table, path)
