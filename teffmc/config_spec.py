"""The run configuration as frozen dataclasses: what :func:`teffmc.config.load_config` returns.

With the defaults of every setting (the TOML reading and its validation are in
:mod:`teffmc.config`).
"""

from dataclasses import dataclass, field, replace
from pathlib import Path

from .components import SWITCHES
from .priors import Prior

__all__ = ["Config", "Epoch", "SpectrumSpec", "ModelSpec", "SamplerSpec", "DEFAULT_MISMATCH"]

#: a spectrum's model-mismatch term when the config does not say (see teffmc.config)
DEFAULT_MISMATCH = "correlated"


@dataclass(frozen=True)
class SpectrumSpec:
    """One spectrum of an epoch (``spectra`` entry): the file, how to read it, its terms."""

    file: Path
    air: bool | None = None
    resolution: float | None = None
    fwhm_A: float | None = None
    wave_range: tuple | None = None
    mask: tuple = ()
    telluric_mask: bool = True
    calibration_order: int = -1
    calibration_sigma: float = 0.2
    rv_kms: float = 0.0
    wave_unit: str | None = None
    flux_unit: str | None = None
    columns: tuple = ()           # ((role, column or FITS extension name), ...)
    mismatch: str = DEFAULT_MISMATCH


@dataclass(frozen=True)
class Epoch:
    """One ``[[epoch]]`` table: its label, spectra (:class:`SpectrumSpec`) and photometry."""

    label: str
    spectra: tuple = ()
    photometry: Path | None = None


@dataclass(frozen=True)
class ModelSpec:
    """The ``[model]`` table: the model variant (law, veil, grains, likelihood, switches)."""

    extinction_law: str = "CCM89"
    veil: str = "none"
    grain_material: str = "silicate"
    grain_spread_dex: float = 0.1
    scattering: bool = False
    scatter_cone_deg: float = 90.0
    patches: bool = False
    likelihood: str = "gaussian"
    student_nu: float = 4.0
    interp_error: bool = False
    mismatch_terms: tuple = ()    # the kinds of mismatch term the spectra use (set by parse)
    grid_nuisance: bool = True    # sample the grid's nuisance axes (when it has any)
    #: the optional components turned on by their declared ``[model]`` switch
    #: (teffmc.components.SWITCHES), registry order
    switches: tuple = ()


@dataclass(frozen=True)
class SamplerSpec:
    """The ``[sampler]`` table: walkers, step limits, stop-rule cadence, seed, evidence."""

    n_walkers: int = 48
    max_steps: int = 20000
    min_steps: int = 1000
    check_every: int = 500
    seed: int = 1
    n_starts: int = 16
    evidence: bool = False
    nlive: int = 200


#: the report formats (teffmc.report.output): figures, LaTeX, Markdown, CSV, the HTML page
REPORT_FORMATS = ("png", "pdf", "tex", "md", "csv", "html")


@dataclass(frozen=True)
class Config:
    """A whole run configuration: data, model, priors, sampler, hypotheses and grids."""

    path: Path
    name: str
    grid: str
    epochs: tuple
    model: ModelSpec
    priors: dict
    shared: tuple
    sampler: SamplerSpec
    distance_pc: Prior | None = None
    parallax_mas: Prior | None = None
    hypotheses: tuple = ()
    raw: dict = field(default_factory=dict, compare=False, repr=False)
    grids: tuple = ()   # several grids: each is fitted, the results stacked (teffmc.stacking)
    report_formats: tuple = REPORT_FORMATS   # [report] formats: the files written per run

    def variants(self):
        """``[(name, Config)]``: one config per declared hypothesis (or just this one)."""
        if not self.hypotheses:
            return [(None, self)]
        return [(name, replace(self, model=_override(self.model, over), hypotheses=()))
                for name, over in self.hypotheses]


def _override(model, over):
    """Return ``model`` with a hypothesis's settings.

    Its ``switches`` ({key: bool}) turn the declared components on or off, the model's
    other switches kept.
    """
    over = dict(over)
    if "switches" in over:
        sw = over["switches"]
        on = (set(model.switches) | {k for k, v in sw.items() if v}) - {
            k for k, v in sw.items() if not v}
        over["switches"] = tuple(k for k in SWITCHES if k in on)
    return replace(model, **over)
