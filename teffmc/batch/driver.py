"""``fit_many``: the batch in the main process.

Plan, skip finished stars, run the engine, record each star in the tables and the log.
"""

import math
import sys
import time
from pathlib import Path

from ..errors import ClusterError, ConfigError
from ..runfolder import batch_lock
from .engine import Engine
from .netcdf import write_netcdf
from .plan import finished_summary, plan_stars
from .tables import (
    TABLE,
    plain_row,
    previous_wall_times,
    row_from_summary,
    survey_table,
    write_tables,
)

__all__ = ["fit_many", "STATUSES", "LOG", "ENGINE", "NETCDF_EVERY"]

STATUSES = ("ok", "not_converged", "failed", "pending")
LOG, ENGINE = "batch.log", "batch-engine.json"
NETCDF_EVERY = 60.0  # [s] batch-summaries.nc is rewritten at most this often during a batch


def _duration(s):
    s = float(s)
    if s < 90:
        return f"{s:.0f} s" if s >= 10 else f"{s:.1f} s"
    if s < 5400:
        return f"{s / 60:.0f} min"
    return f"{int(s // 3600)} h {int(s % 3600 // 60):02d} min"


class _Progress:
    def __init__(self, log_path, total, quiet):
        self.total, self.quiet, self.done = total, quiet, 0
        self.fitted, self.t0 = 0, time.perf_counter()
        self.file = open(log_path, "a", encoding="utf-8")  # noqa: SIM115 (closed in close())

    def line(self, text, extra=None, echo=True):
        self.file.write(text + "\n")
        if extra:
            self.file.write(extra)
        self.file.flush()
        if echo and not self.quiet:
            print(text, file=sys.stderr, flush=True)

    def star(self, name, what, *, fitted, extra=None):
        self.done += 1
        self.fitted += fitted
        text = f"[{self.done}/{self.total}] {name} {what}"
        left = self.total - self.done
        if left and self.fitted:
            eta = (time.perf_counter() - self.t0) / self.fitted * left
            text += f", ETA {_duration(eta)}"
        self.line(text, extra)

    def close(self):
        self.file.close()



def fit_many(configs, out, workers=None, redo=False, quiet=True, scheduler=None,
             netcdf=False):
    """Fit many stars, one config file each, into ``out/<config file stem>/``.

    Parameters
    ----------
    configs : sequence of path-like
        Config files; their stems (file names without ``.toml``) name the stars and must
        be unique.
    out : path-like
        Folder for the runs, ``batch.ecsv`` and ``batch.parquet`` (one row per star),
        ``batch.log`` and ``batch-engine.json``. With ``scheduler``, every worker must
        see this folder at the same path (a shared file system).
    workers : int, optional
        Processes of the embedded Dask ``LocalCluster`` fitting stars at the same time
        (each with one thread and one BLAS thread); default 1. Not with ``scheduler``.
    redo : bool
        Fit again stars whose folder already holds a finished run (default: skip them,
        so re-running an interrupted batch resumes it).
    quiet : bool
        No progress lines on stderr (``batch.log`` gets them regardless).
    scheduler : str, optional
        Address of a running Dask scheduler (``tcp://host:8786``) to fit the stars on
        its workers instead of an embedded cluster.
    netcdf : bool
        Also write ``out/batch-summaries.nc``: every star's posterior summaries (median,
        p16, p84, mean, sd, r_hat, ess_bulk of every parameter and derived quantity)
        in one netCDF file (:mod:`teffmc.batch.netcdf`), after the batch and, while it
        runs, at most every :data:`NETCDF_EVERY` seconds.

    Returns
    -------
    astropy.table.Table
        The table written to ``out/batch.ecsv``: columns star, config, status (ok,
        not_converged, failed), reason, wall_time_s, n_steps, run (the run folder
        relative to ``out``), [hypothesis], ``<parameter>_median``, ``_p16``, ``_p84``
        for every fitted parameter of any star (masked where a star lacks it), caution.

    Raises
    ------
    ConfigError
        No configs, two configs with the same stem, ``out`` not a folder, ``workers``
        < 1, or both ``workers`` and ``scheduler`` -- before anything is written.
    ClusterError
        The scheduler cannot be reached, or the cluster was lost during the batch
        (finished stars and checkpoints are kept: run the same call again to resume).
    """
    if scheduler is not None and workers is not None:
        raise ConfigError("give the number of workers of the embedded cluster or the "
                          "address of a running scheduler, not both",
                          key="--workers/--scheduler", value=f"{workers}/{scheduler}")
    if scheduler is not None and (not isinstance(scheduler, str) or not scheduler.strip()):
        raise ConfigError(f"should be a scheduler address but got {scheduler!r}",
                          key="--scheduler", value=scheduler)
    workers = 1 if workers is None else workers
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise ConfigError(f"should be an integer >= 1 but got {workers!r}", key="--workers",
                          value=workers)
    out = Path(out)
    plan = plan_stars(configs, out)
    out.mkdir(parents=True, exist_ok=True)
    out = out.resolve()
    with batch_lock(out):  # one batch per folder
        return _fit_many_locked(plan, out, workers, scheduler, redo, quiet, bool(netcdf))


def _first_rows(plan, out, redo):
    """Return the table's rows before any fit and the indices of the stars to fit.

    Finished stars are copied from their runs, the others are pending.
    """
    old_wall = previous_wall_times(out / TABLE)
    rows, todo = [], []
    for i, (star, cfg) in enumerate(plan):
        done = None if redo else finished_summary(out / star)
        if done is not None:
            try:
                rows.append(row_from_summary(star, cfg, done, out, old_wall.get(star)))
                continue
            except (OSError, ValueError, KeyError, TypeError):
                pass  # an unreadable summary: fit the star again
        rows.append(plain_row(star, cfg, "pending"))
        todo.append(i)
    return rows, todo


class _Writer:
    """Rewrites the tables whenever a star finishes; the netCDF at most every NETCDF_EVERY s.

    Why not on every star: writing batch-summaries.nc costs 0.2-0.45 s for 4-9 quantities
    of 100 or 1000 stars alike (h5netcdf's overhead per variable, 7 per quantity; measured
    in DEVELOPERS.md), 1.5-3 % of a core when 2 workers finish a star every 15 s. Once a
    minute it is < 1 %, and a cut-off batch still leaves a file at most a minute old.
    """

    def __init__(self, out, netcdf):
        self.out, self.netcdf, self.last = out, netcdf, -math.inf

    def __call__(self, rows, final=False):
        write_tables(rows, self.out)
        if self.netcdf and (final or time.monotonic() - self.last >= NETCDF_EVERY):
            write_netcdf(rows, self.out)
            self.last = time.monotonic()


def _fit_many_locked(plan, out, workers, scheduler, redo, quiet, netcdf):
    from .. import __version__

    rows, todo = _first_rows(plan, out, redo)
    write = _Writer(out, netcdf)
    progress = _Progress(out / LOG, len(plan), quiet)
    engine = Engine(min(workers, max(len(todo), 1)), scheduler)
    try:
        if todo:
            engine.start()
        progress.line(f"teffmc {__version__} batch {time.strftime('%Y-%m-%d %H:%M:%S')}: "
                      f"{len(plan)} stars ({len(plan) - len(todo)} finished earlier), "
                      f"{engine.describe() if todo else 'no worker needed'}, out {out}")
        if todo and engine.dashboard:
            progress.line(f"Dask dashboard: {engine.dashboard}")
        pending = set(todo)
        for i, r in enumerate(rows):
            if i not in pending:
                progress.star(r["star"], f"skipped (finished earlier, {r['status']})",
                              fitted=False)
        write(rows)
        if todo:

            def on_result(i, res):
                _record(rows, i, *plan[i], res, out, progress)
                write(rows)

            engine.run(plan, todo, out, redo, on_result)
            write(rows, final=True)  # the netCDF with the last stars
        from ..report.survey import write_survey_html  # survey.html beside batch.ecsv
        write_survey_html(out)
        counts = {s: sum(r["status"] == s for r in rows) for s in STATUSES}
        progress.line(f"done in {_duration(time.perf_counter() - progress.t0)}: "
                      f"{counts['ok']} ok, {counts['not_converged']} not converged, "
                      f"{counts['failed']} failed; table {out / TABLE}")
        if engine.records:
            progress.line(engine.cache_line())
    except ClusterError as exc:
        progress.line(f"stopped: {' '.join(str(exc).split())}", echo=False)  # the CLI says it
        raise
    except (KeyboardInterrupt, SystemExit):
        progress.line("interrupted; re-run the same command to resume")
        raise
    finally:
        try:
            engine.close()
        finally:
            if engine.records:
                engine.write_report(out / ENGINE)
            progress.close()
    return survey_table(rows)


def _record(rows, i, star, cfg, res, out, progress):
    if res["ok"]:
        try:
            rows[i] = row_from_summary(star, cfg, res["summary"], out, res["wall"])
        except (OSError, ValueError, KeyError, TypeError) as exc:
            res = {"ok": False, "wall": res["wall"], "traceback": None,
                   "reason": f"internal error: unreadable {res['summary']}: {exc}"}
    if not res["ok"]:
        rows[i] = plain_row(star, cfg, "failed", res["reason"], res["wall"])
    r = rows[i]
    wall = "" if r["wall_time_s"] is None else f" {_duration(r['wall_time_s'])}"
    what = f"{r['status']}{wall}" + (f": {r['reason']}" if r["status"] == "failed" else "")
    extra = None
    if res.get("traceback"):
        extra = "".join("    " + ln + "\n" for ln in res["traceback"].rstrip().splitlines())
    progress.star(star, what, fitted=True, extra=extra)
