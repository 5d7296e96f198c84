"""The stars of a batch: the list file, one star per config stem, finished runs."""

import os
from pathlib import Path

from ..errors import ConfigError
from ..runfolder import finished_run

__all__ = ["read_config_list", "plan_stars", "finished_summary"]


def read_config_list(path):
    """Config paths from a text file, one a line; blank lines and ``#`` comments skipped.

    Relative paths are resolved against the folder of the list file.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(f"cannot read the list of configs {path} ({exc.strerror})",
                          key="--list", value=str(path)) from None
    out = []
    for line in text.splitlines():
        line = line.split("#", 1)[0].strip()
        if line:
            p = Path(line).expanduser()
            out.append(p if p.is_absolute() else path.parent / p)
    return out


def plan_stars(configs, out):
    """``[(stem, config path)]`` in input order; refuse shared stems before any work."""
    if isinstance(configs, (str, os.PathLike)):
        configs = [configs]
    configs = [Path(c) for c in configs]
    if not configs:
        raise ConfigError("no config files given", key="CONFIG")
    by_stem = {}
    for c in configs:
        by_stem.setdefault(c.stem, []).append(c)
    dups = {s: cs for s, cs in by_stem.items() if len(cs) > 1}
    if dups:
        listing = "; ".join(f"{s}: {', '.join(str(c) for c in cs)}" for s, cs in dups.items())
        raise ConfigError(f"{len(dups)} star name(s) shared by several configs (each star is "
                          f"fitted into {out}/<config file stem>/, so stems must differ): "
                          f"{listing}", key="CONFIG")
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise ConfigError(f"{out} exists and is not a folder", key="--out", value=str(out))
    return [(c.stem, c) for c in configs]


def finished_summary(folder):
    """Return ``summary.json`` of the finished run in ``folder``, or None if there is none.

    For a config with hypotheses, the best-ranked hypothesis's.
    """
    run = finished_run(folder)  # decided by the completion marker, written last
    return None if run is None else run / "summary.json"


