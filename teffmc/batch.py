"""Survey mode: many stars, one config file each, fitted in a pool of processes.

``fit_many`` (and ``teffmc batch``) fits every config into ``OUT/<config file stem>/``
and keeps one table, ``OUT/batch.ecsv``, with a row per star. Design:

- a pool of ``workers`` processes (started with "spawn": no fork of a threaded parent),
  each limited to one BLAS thread (threadpoolctl, as the sampler does), at most one star
  per worker in flight; if a worker process dies (a crash, the out-of-memory killer) the
  stars in flight are tried again one at a time in fresh pools, and the one whose worker
  dies alone is recorded as failed;
- one batch per folder: the batch holds ``OUT/.batch-lock`` (teffmc.runfolder), a
  second batch into the same folder is refused (exit 2, naming the holder);
- a star whose folder already holds a finished run (a valid completion marker
  ``complete.json``, see teffmc.runfolder) is skipped unless ``redo``: re-running
  the same command resumes an interrupted batch; a star cut off mid-fit continues from
  its sampler checkpoint (``OUT/<stem>.partial/chain.h5``);
- any exception in one star (bad config, bad data, a prior off the grid, a bug) is
  recorded as status "failed" with a one-line reason; the other stars go on;
- the table is rewritten atomically (temporary file + ``os.replace``) whenever a star
  finishes, so a killed batch leaves a valid table (unfinished stars "pending");
- the numbers in the table are copied from each run's ``summary.json``, never
  recomputed.
"""

import json
import os
import sys
import tempfile
import threading
import time
import traceback
from collections import deque
from pathlib import Path

from .errors import ConfigError, TeffmcError
from .runfolder import batch_lock, finished_run

__all__ = ["fit_many", "read_config_list", "finished_summary", "STATUSES"]

STATUSES = ("ok", "not_converged", "failed", "pending")
STATS = ("median", "p16", "p84")   # the names summary.json uses
TABLE, LOG = "batch.ecsv", "batch.log"
BLAS_ENV = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
            "BLIS_NUM_THREADS", "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")


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


def _plan(configs, out):
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
    """``summary.json`` of the finished run in ``folder`` (the best-ranked hypothesis for a
    config with hypotheses), or None when the folder holds no finished run."""
    run = finished_run(folder)  # decided by the completion marker, written last
    return None if run is None else run / "summary.json"


# ---------------------------------------------------------------- in the worker processes

_LIMITS = None


def _init_worker():
    """One BLAS thread per worker: N workers share N cores (see run.fit_one).

    Workers ignore Ctrl-C: the main process stops them (the sampler checkpoint, written
    atomically, lets the next batch resume the stars cut off).
    """
    global _LIMITS
    import signal
    import warnings

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    threading.Thread(target=_exit_with_parent, args=(os.getppid(),), daemon=True).start()
    for k in BLAS_ENV:  # for libraries loaded from here on
        os.environ[k] = "1"
    from . import run  # noqa: F401  (loads numpy, scipy, astropy, emcee once per worker)
    from .errors import ConvergenceWarning
    from threadpoolctl import threadpool_limits

    _LIMITS = threadpool_limits(limits=1)  # for libraries already loaded; kept for life
    # the batch records non-convergence as a status; the warning would only add noise
    warnings.simplefilter("ignore", ConvergenceWarning)


def _exit_with_parent(parent):
    """A worker whose main process was killed (SIGKILL) would wait for work forever."""
    while os.getppid() == parent:
        time.sleep(1.0)
    os._exit(1)


def _one_line(exc):
    msg = " ".join(str(exc).split())
    if isinstance(exc, TeffmcError):
        return msg
    return f"internal error: {type(exc).__name__}: {msg}" if msg else \
        f"internal error: {type(exc).__name__}"


def _fit_star(config, out, redo):
    """Fit one star; never raises an Exception (a KeyboardInterrupt passes through)."""
    from .config import load_config
    from .run import fit

    t0 = time.perf_counter()
    out = Path(out)

    def wall():
        return round(time.perf_counter() - t0, 3)

    try:
        cfg = load_config(config)
        if len(cfg.variants()) > 1:
            resume = not redo  # fit() resumes or keeps each hypothesis's run as it finds it
        else:
            resume = not redo and (out.with_name(out.name + ".partial") / "chain.h5").is_file()
        res = fit(cfg, out, resume=resume, quiet=True, overwrite=True)  # batch owns `out`
        return {"ok": True, "wall": wall(), "summary": str(res.out / "summary.json")}
    except Exception as exc:  # one star's failure must not stop the survey
        tb = None if isinstance(exc, TeffmcError) else traceback.format_exc()
        return {"ok": False, "wall": wall(), "reason": _one_line(exc),
                "traceback": tb}


_TASK = _fit_star  # what the pool runs per star (a test replaces it to kill a worker)


# ---------------------------------------------------------------- in the main process

def _row_from_summary(star, config, path, out, wall):
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
        "cautions": [c for c in s.get("cautions", []) if not c.startswith("not converged")],
    }


def _plain_row(star, config, status, reason="", wall=None):
    return {"star": star, "config": str(config), "status": status, "reason": reason,
            "caution": "", "wall_time_s": wall, "n_steps": None, "run": "", "hypothesis": "",
            "stats": {}, "cautions": []}


def _table(rows):
    """astropy Table, one row per star; parameter columns are the union over stars."""
    import numpy as np
    from astropy.table import MaskedColumn, Table

    from . import __version__

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


def _write_atomic(table, path):
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        table.write(tmp, format="ascii.ecsv", overwrite=True)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _previous_wall_times(path):
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

    def line(self, text, extra=None):
        self.file.write(text + "\n")
        if extra:
            self.file.write(extra)
        self.file.flush()
        if not self.quiet:
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


def fit_many(configs, out, workers=1, redo=False, quiet=True):
    """Fit many stars, one config file each, into ``out/<config file stem>/``.

    Parameters
    ----------
    configs : sequence of path-like
        Config files; their stems (file names without ``.toml``) name the stars and must
        be unique.
    out : path-like
        Folder for the runs, ``batch.ecsv`` (one row per star) and ``batch.log``.
    workers : int
        Processes fitting stars at the same time (each with one BLAS thread).
    redo : bool
        Fit again stars whose folder already holds a finished run (default: skip them,
        so re-running an interrupted batch resumes it).
    quiet : bool
        No progress lines on stderr (``batch.log`` gets them regardless).

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
        No configs, two configs with the same stem, ``out`` not a folder, or
        ``workers`` < 1 -- before anything is written.
    """

    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise ConfigError(f"should be an integer >= 1 but got {workers!r}", key="--workers",
                          value=workers)
    out = Path(out)
    plan = _plan(configs, out)
    out.mkdir(parents=True, exist_ok=True)
    out = out.resolve()
    with batch_lock(out):  # one batch per folder
        return _fit_many_locked(plan, out, workers, redo, quiet)


def _fit_many_locked(plan, out, workers, redo, quiet):
    from . import __version__

    table_path = out / TABLE
    old_wall = _previous_wall_times(table_path)
    rows, todo = [], []
    for i, (star, cfg) in enumerate(plan):
        done = None if redo else finished_summary(out / star)
        if done is not None:
            try:
                rows.append(_row_from_summary(star, cfg, done, out, old_wall.get(star)))
                continue
            except (OSError, ValueError, KeyError, TypeError):
                pass  # an unreadable summary: fit the star again
        rows.append(_plain_row(star, cfg, "pending"))
        todo.append(i)
    progress = _Progress(out / LOG, len(plan), quiet)
    try:
        progress.line(f"teffmc {__version__} batch {time.strftime('%Y-%m-%d %H:%M:%S')}: "
                      f"{len(plan)} stars ({len(plan) - len(todo)} finished earlier), "
                      f"{min(workers, max(len(todo), 1))} worker(s), out {out}")
        pending = set(todo)
        for i, r in enumerate(rows):
            if i not in pending:
                progress.star(r["star"], f"skipped (finished earlier, {r['status']})",
                              fitted=False)
        _write_atomic(_table(rows), table_path)
        _run_pool(plan, todo, rows, out, workers, redo, progress, table_path)
        from .report.survey import write_survey_html  # survey.html beside batch.ecsv
        write_survey_html(out)
        counts = {s: sum(r["status"] == s for r in rows) for s in STATUSES}
        progress.line(f"done in {_duration(time.perf_counter() - progress.t0)}: "
                      f"{counts['ok']} ok, {counts['not_converged']} not converged, "
                      f"{counts['failed']} failed; table {table_path}")
    except (KeyboardInterrupt, SystemExit):
        progress.line("interrupted; re-run the same command to resume")
        raise
    finally:
        progress.close()
    return _table(rows)


def _run_pool(plan, todo, rows, out, workers, redo, progress, table_path):
    queue, suspects = deque(todo), deque()
    while queue or suspects:
        if suspects:  # after a worker died: one star per fresh pool, so the culprit is known
            suspects += _pool_pass(deque([suspects.popleft()]), 1, plan, rows, out, redo,
                                   progress, table_path)
        else:
            suspects += _pool_pass(queue, min(workers, len(queue)), plan, rows, out, redo,
                                   progress, table_path)


def _pool_pass(queue, n, plan, rows, out, redo, progress, table_path):
    """Fit stars from ``queue`` in a pool of ``n`` workers until it is empty or the pool
    breaks (a worker died); return the stars that were in flight when it broke."""
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    pool = ProcessPoolExecutor(max_workers=n, initializer=_init_worker,
                               mp_context=multiprocessing.get_context("spawn"))
    running, hit, broken = {}, [], False
    try:
        while running or (queue and not broken):
            # at most one star per worker in flight: a dying worker hits only running stars
            while queue and not broken and len(running) < n:
                i = queue.popleft()
                star, cfg = plan[i]
                try:
                    running[pool.submit(_TASK, str(cfg), str(out / star), redo)] = i
                except BrokenProcessPool:
                    queue.appendleft(i)
                    broken = True
            if not running:
                break
            finished, _ = wait(running, return_when=FIRST_COMPLETED)
            for fut in finished:
                i = running.pop(fut)
                star, cfg = plan[i]
                try:
                    res = fut.result()
                except BrokenProcessPool as exc:
                    broken = True
                    if n > 1:  # the culprit may be another star in flight: try it alone
                        hit.append(i)
                        continue
                    res = {"ok": False, "wall": None, "traceback": None,
                           "reason": "internal error: the worker process died while fitting "
                                     f"this star ({' '.join(str(exc).split())})"}
                _record(rows, i, star, cfg, res, out, progress)
                _write_atomic(_table(rows), table_path)
    except BaseException:  # Ctrl-C or SIGTERM in the main process: stop the workers now
        _terminate(pool)
        raise
    pool.shutdown(wait=True)
    return hit


def _terminate(pool):
    stop = getattr(pool, "terminate_workers", None)  # Python >= 3.14
    if stop is not None:
        stop()
        return
    for proc in list((getattr(pool, "_processes", None) or {}).values()):  # no public way
        proc.terminate()
    pool.shutdown(wait=False, cancel_futures=True)


def _record(rows, i, star, cfg, res, out, progress):
    if res["ok"]:
        try:
            rows[i] = _row_from_summary(star, cfg, res["summary"], out, res["wall"])
        except (OSError, ValueError, KeyError, TypeError) as exc:
            res = {"ok": False, "wall": res["wall"], "traceback": None,
                   "reason": f"internal error: unreadable {res['summary']}: {exc}"}
    if not res["ok"]:
        rows[i] = _plain_row(star, cfg, "failed", res["reason"], res["wall"])
    r = rows[i]
    wall = "" if r["wall_time_s"] is None else f" {_duration(r['wall_time_s'])}"
    what = f"{r['status']}{wall}" + (f": {r['reason']}" if r["status"] == "failed" else "")
    extra = None
    if res.get("traceback"):
        extra = "".join("    " + ln + "\n" for ln in res["traceback"].rstrip().splitlines())
    progress.star(star, what, fitted=True, extra=extra)
