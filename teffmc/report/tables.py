"""summary.json and summary.ecsv."""

import json

import numpy as np

from ..parameters import UNITS

__all__ = ["write_summary"]

COLUMNS = ("median", "p16", "p84", "mean", "sd", "r_hat", "ess_bulk", "ess_tail")


def write_summary(summary, json_path, ecsv_path):
    """Write the summary dict (DESIGN.md section 3) as JSON and as an ECSV table."""
    from astropy.table import Table

    with open(json_path, "w", encoding="utf-8") as f:
        json.dump(summary, f, indent=2, allow_nan=True)
    rows = []
    for group in ("parameters", "derived"):
        for name, stats in summary.get(group, {}).items():
            rows.append((name, group, UNITS.get(name.partition("@")[0], ""),
                         *[stats.get(c, np.nan) for c in COLUMNS]))
    t = Table(rows=rows, names=("name", "kind", "unit", *COLUMNS),
              dtype=(str, str, str, *[float] * len(COLUMNS))) if rows else Table()
    t.meta["converged"] = bool(summary["converged"])
    t.meta["reason"] = summary.get("reason", "")
    t.meta["note"] = ("Intervals are the 16th-84th percentiles of the marginal posterior. "
                      + ("" if summary["converged"] else "NOT CONVERGED: do not quote."))
    t.write(ecsv_path, format="ascii.ecsv", overwrite=True)
