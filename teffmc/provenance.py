"""What a run used, recorded at fit time for the methods paragraph.

This is ``[teffmc.provenance]`` of run.toml: data sets (files, pixels, ranges, masks,
resolution, bands), grid (name, checksum, its own stated provenance and approximations),
model terms and sampler settings with the stop rule actually applied.

Only plain values (str, int, float, bool, lists, dicts) so that the TOML writer keeps them
and ``teffmc report`` can rebuild the text from run.toml alone.
"""

from pathlib import Path

import numpy as np

from .sampling_stop import (
    BURN_TAUS,
    RHAT_GROUPS,
    RHAT_MAX,
    RHAT_WALKER_MAX,
    TAU_FACTOR,
    TAU_NOISE_K,
    TAU_RTOL,
    THIN_TAUS,
)

__all__ = ["run_provenance", "data_labels", "MOVES"]

#: the ensemble moves of teffmc.sample.default_moves, as (name, weight, reference key)
MOVES = [("differential-evolution", 0.8, "terBraak2006"), ("stretch", 0.2, "Goodman2010")]


def data_labels(cfg):
    """Return ``{"epoch.channel": "label: file name"}`` for the figures.

    Data are named as in the config: the epoch label and the file, never the internal
    ``spectrum1``.
    """
    out = {}
    for ep in cfg.epochs:
        for i, spec in enumerate(ep.spectra):
            out[f"{ep.label}.spectrum{i + 1}"] = f"{ep.label}: {Path(spec.file).name}"
        if ep.photometry is not None:
            out[f"{ep.label}.photometry"] = f"{ep.label}: {Path(ep.photometry).name}"
    return out


def _spectrum_record(ep, i, spec, ch):
    return {"key": f"{ep.label}.{ch.name}", "epoch": ep.label, "kind": "spectrum",
            "file": Path(spec.file).name, "n_points": int(ch.n_points),
            "wave_min": float(np.min(ch.wave)), "wave_max": float(np.max(ch.wave)),
            "resolution": -1.0 if spec.resolution is None else float(spec.resolution),
            "fwhm_A": -1.0 if spec.fwhm_A is None else float(spec.fwhm_A),
            "mask": [list(map(float, m)) for m in spec.mask],
            "telluric_mask": bool(spec.telluric_mask),
            "calibration_order": int(spec.calibration_order),
            "calibration_sigma": float(spec.calibration_sigma),
            "rv_kms": float(spec.rv_kms), "mismatch": str(spec.mismatch)}


def _photometry_record(ep, ch):
    return {"key": f"{ep.label}.{ch.name}", "epoch": ep.label, "kind": "photometry",
            "file": Path(ep.photometry).name, "n_points": int(len(ch.bands)),
            "bands": list(ch.bands)}


def _colour_coordinates(prep):
    """Return True when the sampler uses the colour coordinates (teffmc.sampling_colour)."""
    from .sampling_colour import table_for
    from .sampling_coords import SamplerCoordinates

    table = table_for(prep.space, prep.grid)
    return SamplerCoordinates(prep.space, None, colour=table).coordinate_tag == "colour"


def run_provenance(prep):
    """Return the ``[teffmc.provenance]`` record of a prepared run (see the module docstring)."""
    cfg = prep.config
    data = []
    for ep in cfg.epochs:
        chans = {ch.name: ch for ch in prep.channels[ep.label]}
        for i, spec in enumerate(ep.spectra):
            data.append(_spectrum_record(ep, i, spec, chans[f"spectrum{i + 1}"]))
        if ep.photometry is not None:
            data.append(_photometry_record(ep, chans["photometry"]))
    grid = prep.grid
    s = cfg.sampler
    model = {k: (list(v) if isinstance(v, tuple) else v) for k, v in vars(cfg.model).items()}
    return {
        "data": data,
        "grid": {"name": str(cfg.grid), "label": str(getattr(grid, "name", cfg.grid)),
                 "checksum": str(grid.checksum),
                 "nuisance": list(getattr(grid, "nuisance_names", ()) or ()),
                 "provenance": {str(k): str(v) for k, v in
                                (getattr(grid, "provenance", {}) or {}).items()}},
        "model": model,
        "sampler": {"n_walkers": s.n_walkers, "max_steps": s.max_steps,
                    "min_steps": s.min_steps, "check_every": s.check_every,
                    "n_starts": s.n_starts, "seed": s.seed, "evidence": bool(s.evidence),
                    "nlive": s.nlive,
                    "moves": [{"name": n, "weight": w, "ref": r} for n, w, r in MOVES],
                    "tau_factor": TAU_FACTOR, "tau_rtol": TAU_RTOL,
                    "tau_noise_k": TAU_NOISE_K, "rhat_max": RHAT_MAX,
                    "rhat_groups": RHAT_GROUPS, "rhat_walker_max": RHAT_WALKER_MAX,
                    "burn_taus": BURN_TAUS, "thin_taus": THIN_TAUS,
                    "log_coordinates": [n for n, p in zip(prep.space.names, prep.space.priors)
                                        if p.kind == "loguniform"],
                    "colour_coordinates": _colour_coordinates(prep)},
        "shared": list(cfg.shared),
    }
