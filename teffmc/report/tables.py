"""summary.json and summary.ecsv."""

import json
import math

import numpy as np

from ..parameters import UNITS

__all__ = ["write_summary", "write_summary_ecsv", "write_json", "strict_json"]

COLUMNS = ("median", "p16", "p84", "mean", "sd", "r_hat", "ess_bulk", "ess_tail")


def strict_json(obj):
    """``obj`` with every NaN or infinity (Python or numpy float) replaced by None.

    Strict JSON has no NaN: ``json.dump`` would write a bare ``NaN`` that other readers
    (jq, JavaScript, many JSON libraries) refuse. A number that cannot be computed (R-hat
    of a constant draw, ln Z when no evidence was asked for) is written as ``null``.
    """
    if isinstance(obj, dict):
        return {k: strict_json(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [strict_json(v) for v in obj]
    if isinstance(obj, (float, np.floating)):
        return float(obj) if math.isfinite(obj) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


def write_json(obj, path):
    """Write ``obj`` as strict JSON (non-finite numbers as null, see :func:`strict_json`)."""
    with open(path, "w", encoding="utf-8") as f:
        json.dump(strict_json(obj), f, indent=2, allow_nan=False)


def write_summary(summary, json_path, ecsv_path):
    """Write the summary dict (DESIGN.md section 3) as JSON and as an ECSV table.

    Non-finite numbers become ``null`` in summary.json (read back as None) and NaN in
    summary.ecsv; a summary read back from summary.json can be written again.
    """
    write_json(summary, json_path)
    write_summary_ecsv(summary, ecsv_path)


def write_summary_ecsv(summary, ecsv_path):
    """Write the ECSV table of :func:`write_summary` alone (``teffmc report`` redraws it)."""
    from astropy.table import Table

    rows = []
    for group in ("parameters", "derived"):
        for name, stats in summary.get(group, {}).items():
            rows.append((name, group, UNITS.get(name.partition("@")[0], ""),
                         *[np.nan if stats.get(c) is None else stats[c] for c in COLUMNS]))
    t = Table(rows=rows, names=("name", "kind", "unit", *COLUMNS),
              dtype=(str, str, str, *[float] * len(COLUMNS))) if rows else Table()
    t.meta["converged"] = bool(summary["converged"])
    t.meta["reason"] = summary.get("reason", "")
    t.meta["note"] = ("Intervals are the 16th-84th percentiles of the marginal posterior. "
                      + ("" if summary["converged"] else "NOT CONVERGED: do not quote."))
    t.write(ecsv_path, format="ascii.ecsv", overwrite=True)
