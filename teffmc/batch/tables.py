"""The survey table: one row per star, copied from its run's summary.json.

Written as batch.ecsv and batch.parquet, each replaced atomically (temporary file +
``os.replace``).
"""

import json
import os
import tempfile
from pathlib import Path

__all__ = ["STATS", "TABLE", "PARQUET", "row_from_summary", "plain_row", "survey_table",
           "write_atomic", "write_tables", "previous_wall_times"]

STATS = ("median", "p16", "p84")   # the names summary.json uses
TABLE, PARQUET = "batch.ecsv", "batch.parquet"

def row_from_summary(star, config, path, out, wall):
    """Return the table row of a star whose run wrote ``path`` (its summary.json).

    Status "ok" or "not_converged"; ``run`` is the run folder relative to ``out``;
    ``wall`` the fit's wall time [s].
    """
    s = json.loads(Path(path).read_text(encoding="utf-8"))
    converged = bool(s["converged"])
    reason = " ".join(str(s.get("reason", "")).split())
    return {
        "star": star, "config": str(config),
        "status": "ok" if converged else "not_converged",
        "reason": reason,
        "caution": "" if converged else "NOT CONVERGED: do not quote these numbers",
        "wall_time_s": wall, "n_steps": int(s["n_steps"]),
        "run": Path(path).parent.relative_to(out).as_posix(),
        "hypothesis": s.get("hypothesis") or "",
        "stats": {name: {k: st[k] for k in STATS} for name, st in s["parameters"].items()},
        # every statistic of the parameters and derived quantities (batch-summaries.nc)
        "summaries": {g: s.get(g) or {} for g in ("parameters", "derived")},
        "cautions": [c for c in s.get("cautions", []) if not c.startswith("not converged")],
    }


def plain_row(star, config, status, reason="", wall=None):
    """Return the table row of a star without a finished run (pending, failed, ...)."""
    return {"star": star, "config": str(config), "status": status, "reason": reason,
            "caution": "", "wall_time_s": wall, "n_steps": None, "run": "", "hypothesis": "",
            "stats": {}, "summaries": {}, "cautions": []}


def survey_table(rows):
    """Return an astropy Table, one row per star; parameter columns are the union over stars."""
    import numpy as np
    from astropy.table import MaskedColumn, Table

    from .. import __version__

    names = []
    for r in rows:
        names += [n for n in r["stats"] if n not in names]
    t = Table()
    for col in ("star", "config", "status", "reason"):
        t[col] = [r[col] for r in rows]
    for col, dtype, unit in (("wall_time_s", float, "s"), ("n_steps", int, None)):
        vals = [r[col] for r in rows]
        t[col] = MaskedColumn([0 if v is None else v for v in vals], dtype=dtype, unit=unit,
                              mask=[v is None for v in vals])
    t["run"] = [r["run"] for r in rows]
    if any(r["hypothesis"] for r in rows):
        t["hypothesis"] = [r["hypothesis"] for r in rows]
    for n in names:
        for k in STATS:
            vals = [r["stats"].get(n, {}).get(k) for r in rows]
            t[f"{n}_{k}"] = MaskedColumn(
                np.array([np.nan if v is None else v for v in vals], dtype=float),
                mask=[v is None for v in vals])
    t["caution"] = [r["caution"] for r in rows]
    t.meta["teffmc"] = __version__
    cautions = []  # the runs' other cautions (e.g. the built-in grid's), once each
    for r in rows:
        cautions += [c for c in r["cautions"] if c not in cautions]
    if cautions:
        t.meta["cautions"] = cautions
    t.meta["note"] = ("One row per star, in input order; numbers copied from each run's "
                      "summary.json (median and 16th/84th percentiles of the marginal "
                      "posterior). status: ok | not_converged (do not quote; see caution) | "
                      "failed (reason says why; no run) | pending (not finished yet).")
    return t



def write_atomic(path, write):
    """``write(tmp)`` into a temporary file beside ``path``, then rename it to ``path``."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        write(tmp)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _parquet(table, path):
    """Write the survey table as Parquet.

    Masked values are nulls; units, the notes and the cautions are in the file's
    key-value metadata (``teffmc`` JSON).
    """
    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq

    arrays, fields = [], []
    for name in table.colnames:
        col = table[name]
        mask = np.ma.getmaskarray(col) if hasattr(col, "mask") else None
        values = np.asarray(col.filled(0) if mask is not None else col)
        if values.dtype.kind in "US":
            values = values.astype(str).tolist()
        arr = pa.array(values, mask=mask if mask is not None and mask.any() else None)
        meta = {"unit": str(col.unit)} if col.unit is not None else None
        arrays.append(arr)
        fields.append(pa.field(name, arr.type, metadata=meta))
    meta = {"teffmc": json.dumps({k: v for k, v in table.meta.items()})}
    pq.write_table(pa.Table.from_arrays(arrays, schema=pa.schema(fields, metadata=meta)),
                   path)


def write_tables(rows, out):
    """batch.ecsv and batch.parquet, each replaced atomically."""
    t = survey_table(rows)
    write_atomic(out / TABLE, lambda tmp: t.write(tmp, format="ascii.ecsv", overwrite=True))
    write_atomic(out / PARQUET, lambda tmp: _parquet(t, tmp))
    return t


def previous_wall_times(path):
    """{star: wall time} from an earlier batch.ecsv (for the stars skipped now)."""
    if not path.is_file():
        return {}
    try:
        import numpy as np
        from astropy.table import Table

        t = Table.read(path, format="ascii.ecsv")
        return {str(r["star"]): float(r["wall_time_s"]) for r in t
                if "wall_time_s" in t.colnames and not np.ma.is_masked(r["wall_time_s"])}
    except Exception:  # an unreadable old table only costs the old wall times
        return {}

