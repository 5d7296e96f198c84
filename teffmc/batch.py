"""Survey mode: many stars, one config file each, fitted as tasks on a Dask cluster.

``fit_many`` (and ``teffmc batch``) fits every config into ``OUT/<config file stem>/``
and keeps one table, ``OUT/batch.ecsv`` (and the same as ``OUT/batch.parquet``), with a
row per star. Design:

- one code path for every place a survey runs: each star is one ``dask.distributed``
  task (:func:`_fit_star`). By default the batch starts an embedded ``LocalCluster`` of
  ``workers`` processes with one thread each (BLAS limited to one thread: the
  ``*_NUM_THREADS`` variables in the workers' environment and threadpoolctl in the task,
  so N workers share N cores); with ``scheduler`` it attaches to a running cluster (``dask
  scheduler`` + ``dask worker``, dask-jobqueue on SLURM/PBS ...) by address. The files are
  written by the workers into ``OUT``, so every worker must see ``OUT`` (a shared file
  system on a cluster); results travel back as a few numbers and paths only;
- work that is the same for every star is done once per worker process, not per star:
  the grid file is read once (teffmc.photosphere, keyed by path and modification time),
  Mie tables come from memory after the first read (teffmc.dust.cache), extinction tables
  on the same pixels and filter curves are computed once; the counters of these caches are
  reported per worker (``OUT/batch-engine.json`` and the last line of ``batch.log``);
- one batch per folder: the batch holds ``OUT/.batch-lock`` (teffmc.runfolder), a
  second batch into the same folder is refused (exit 2, naming the holder);
- a star whose folder already holds a finished run (a valid completion marker
  ``complete.json``, see teffmc.runfolder) is skipped unless ``redo``: re-running
  the same command resumes an interrupted batch; a star cut off mid-fit continues from
  its sampler checkpoint (``OUT/<stem>.partial/chain.h5``);
- a worker process that dies (a crash, the out-of-memory killer, SIGKILL) loses only the
  star it was fitting: Dask gives that task to another worker, which continues from the
  star's checkpoint (the run-folder lock ``OUT/<stem>.lock`` died with the process). A
  star on which :data:`ALLOWED_FAILURES` + 1 workers died in turn is recorded as failed
  (embedded cluster; an external cluster uses its own ``allowed-failures`` setting);
- any exception in one star (bad config, bad data, a prior off the grid, a bug) is
  recorded as status "failed" with a one-line reason; the other stars go on;
- a lost cluster (scheduler unreachable or killed) stops the batch with one line
  (:class:`~teffmc.errors.ClusterError`, exit 1); what was finished is kept and
  re-running the command resumes;
- the tables are rewritten atomically (temporary file + ``os.replace``) whenever a star
  finishes, so a killed batch leaves valid tables (unfinished stars "pending");
- the numbers in the table are copied from each run's ``summary.json``, never
  recomputed.
"""

import json
import os
import socket
import sys
import tempfile
import threading
import time
import traceback
import uuid
from pathlib import Path

from .errors import ClusterError, ConfigError, TeffmcError
from .runfolder import batch_lock, finished_run

__all__ = ["fit_many", "read_config_list", "finished_summary", "STATUSES"]

STATUSES = ("ok", "not_converged", "failed", "pending")
STATS = ("median", "p16", "p84")   # the names summary.json uses
TABLE, PARQUET, LOG, ENGINE = "batch.ecsv", "batch.parquet", "batch.log", "batch-engine.json"
BLAS_ENV = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
            "BLIS_NUM_THREADS", "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")
#: deaths of workers fitting the same star that the embedded cluster forgives
ALLOWED_FAILURES = 2
CONNECT_TIMEOUT = 30.0  # [s] to reach an existing scheduler
_PARENT_ENV = "TEFFMC_BATCH_PARENT"  # pid of the batch, in the embedded workers' env


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

_SETUP = {"limits": None}
_SETUP_LOCK = threading.Lock()


def _worker_setup():
    """Once per worker process: one BLAS thread per fitting thread, and the batch records
    non-convergence as a status (the warning would only add noise)."""
    with _SETUP_LOCK:
        if _SETUP["limits"] is not None:
            return
        import warnings

        from threadpoolctl import threadpool_limits

        from . import run  # noqa: F401  (numpy, scipy, astropy, emcee: once per worker)
        from .errors import ConvergenceWarning

        for k in BLAS_ENV:  # for libraries loaded from here on
            os.environ[k] = "1"
        _SETUP["limits"] = threadpool_limits(limits=1)  # those already loaded; kept for life
        warnings.simplefilter("ignore", ConvergenceWarning)
        parent = os.environ.get(_PARENT_ENV)
        if parent and parent == str(os.getppid()):  # a worker of the embedded cluster
            threading.Thread(target=_exit_with_parent, args=(os.getppid(),),
                             daemon=True).start()


def _exit_with_parent(parent):
    """A worker whose batch was killed (SIGKILL) would fit the rest of its star for
    nobody (its nanny lives in the batch process)."""
    while os.getppid() == parent:
        time.sleep(1.0)
    os._exit(1)


def _cache_counters():
    """This process's cache counters: {cache: [hits, uses]}."""
    from .dust import cache as dust_cache
    from .dust.extinction import TABLE_STATS
    from .observe import filters
    from .photosphere import grid_cache_info

    g = grid_cache_info()
    f = filters._speclite_filter.cache_info()
    mie = dust_cache.STATS
    return {"grid": [g.hits, g.hits + g.misses],
            "extinction": [TABLE_STATS["hit"], TABLE_STATS["hit"] + TABLE_STATS["miss"]],
            "mie_memory": [mie["memory"], mie["memory"] + mie["disk"] + mie["miss"]],
            "filters": [f.hits, f.hits + f.misses]}


def _peak_rss_mb():
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux


def _one_line(exc):
    msg = " ".join(str(exc).split())
    if isinstance(exc, TeffmcError):
        return msg
    return f"internal error: {type(exc).__name__}: {msg}" if msg else \
        f"internal error: {type(exc).__name__}"


def _fit_star(config, out, redo):
    """Fit one star; never raises (an interrupt becomes ``{"interrupted": True}``).

    Returns a small dict: ``ok``, ``wall`` (the fit, s), ``summary`` (path) or
    ``reason`` and ``traceback``, and ``engine`` (worker, start and stop times, peak
    memory, cache counters) for the batch's engine report.
    """
    from .interrupt import STOP

    _worker_setup()
    start, cpu0 = time.time(), time.process_time()
    t0 = time.perf_counter()
    out = Path(out)
    STOP["requested"] = False  # a stop request of an earlier batch is not for this star

    def wall():
        return round(time.perf_counter() - t0, 3)

    try:
        from .config import load_config
        from .run import fit

        cfg = load_config(config)
        if len(cfg.variants()) > 1:
            resume = not redo  # fit() resumes or keeps each hypothesis's run as it finds it
        else:
            resume = not redo and (out.with_name(out.name + ".partial") / "chain.h5").is_file()
        res = fit(cfg, out, resume=resume, quiet=True, overwrite=True)  # batch owns `out`
        res = {"ok": True, "wall": wall(), "summary": str(res.out / "summary.json"),
               "resumed": resume}
    except KeyboardInterrupt:  # the batch asked its workers to stop: checkpoint kept
        res = {"ok": False, "interrupted": True, "wall": wall(),
               "reason": "interrupted", "traceback": None}
    except Exception as exc:  # one star's failure must not stop the survey
        tb = None if isinstance(exc, TeffmcError) else traceback.format_exc()
        res = {"ok": False, "wall": wall(), "reason": _one_line(exc), "traceback": tb}
    res["engine"] = {"worker": f"{socket.gethostname()}:{os.getpid()}", "start": start,
                     "stop": time.time(), "cpu": round(time.process_time() - cpu0, 3),
                     "peak_rss_mb": round(_peak_rss_mb(), 1),
                     "caches": _cache_counters()}
    return res


def _stop_fits():
    """Run on every worker when the batch is interrupted: the fits stop at their next
    sampler step and keep their checkpoints (teffmc.interrupt.STOP)."""
    from .interrupt import STOP

    STOP["requested"] = True


_TASK = _fit_star  # what the workers run per star (a test replaces it to kill a worker)


# ---------------------------------------------------------------- in the main process

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



def _write_atomic(path, write):
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
    """The survey table as Parquet: masked values are nulls; units, the notes and the
    cautions are in the file's key-value metadata (``teffmc`` JSON)."""
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


def _write_tables(rows, out):
    """batch.ecsv and batch.parquet, each replaced atomically."""
    t = _table(rows)
    _write_atomic(out / TABLE, lambda tmp: t.write(tmp, format="ascii.ecsv", overwrite=True))
    _write_atomic(out / PARQUET, lambda tmp: _parquet(t, tmp))
    return t


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



def fit_many(configs, out, workers=None, redo=False, quiet=True, scheduler=None):
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
    plan = _plan(configs, out)
    out.mkdir(parents=True, exist_ok=True)
    out = out.resolve()
    with batch_lock(out):  # one batch per folder
        return _fit_many_locked(plan, out, workers, scheduler, redo, quiet)


def _fit_many_locked(plan, out, workers, scheduler, redo, quiet):
    from . import __version__

    old_wall = _previous_wall_times(out / TABLE)
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
    engine = _Engine(min(workers, max(len(todo), 1)), scheduler)
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
        _write_tables(rows, out)
        if todo:
            engine.run(plan, todo, rows, out, redo, progress)
        from .report.survey import write_survey_html  # survey.html beside batch.ecsv
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
    return _table(rows)


def _dashboard(client):
    """The address of the Dask dashboard if it serves its pages (they need bokeh), else
    None."""
    import urllib.request

    try:
        if "dashboard" not in client.scheduler_info().get("services", {}):
            return None
        link = client.dashboard_link
        with urllib.request.urlopen(link, timeout=2) as r:  # noqa: S310 (the scheduler's)
            page = r.read(4096).decode("utf-8", "replace")
            return link if r.status == 200 and "needs bokeh" not in page else None
    except Exception:  # a dashboard link is a courtesy
        return None


class _Engine:
    """The Dask side of a batch: an embedded ``LocalCluster`` of ``workers`` processes,
    or a client of the running scheduler at ``address``; the same task, submission and
    result handling for both."""

    def __init__(self, workers, address):
        self.workers, self.address = workers, address
        self.cluster = self.client = None
        self.dashboard = None
        self.records = {}  # star -> the task's engine dict (worker, start, stop, ...)
        self.t_submit = None
        self._log_levels = {}

    # -- start and stop
    def start(self):
        import logging

        import dask
        from distributed import Client, LocalCluster

        # the batch says what went wrong with a star or the cluster, in one line; Dask's
        # client would add its tracebacks (a lost scheduler, a worker that died)
        self._log_levels = _quiet_dask()
        if self.address is None:
            env = {k: "1" for k in BLAS_ENV}
            env[_PARENT_ENV] = str(os.getpid())
            # worker-saturation 1.0: a worker holds only the star it fits, so a dying
            # worker takes no innocent star down with it (see ALLOWED_FAILURES)
            with dask.config.set({"distributed.scheduler.worker-saturation": 1.0,
                                  "distributed.scheduler.allowed-failures": ALLOWED_FAILURES}):
                self.cluster = LocalCluster(
                    n_workers=self.workers, threads_per_worker=1, processes=True,
                    dashboard_address=":0",  # a free port
                    silence_logs=logging.ERROR, env=env)
                self.client = Client(self.cluster, set_as_default=False)
            _quiet_dask()  # silence_logs set "distributed" to ERROR, for the workers
        else:
            from distributed import Client

            try:
                self.client = Client(self.address, timeout=CONNECT_TIMEOUT,
                                     set_as_default=False)
            except (OSError, TimeoutError, ValueError, TypeError) as exc:
                raise ClusterError(f"cannot reach the Dask scheduler at {self.address} "
                                   f"({_brief(exc)})") from None
        self.dashboard = _dashboard(self.client)

    def describe(self):
        if self.address is None:
            return f"{self.workers} worker(s) (Dask LocalCluster)"
        info = self.client.scheduler_info()
        n = len(info.get("workers", {}))
        threads = sum(w.get("nthreads", 0) for w in info.get("workers", {}).values())
        return (f"Dask scheduler {self.address} with {n} worker(s), {threads} thread(s) now"
                + ("" if n else ": stars wait for its workers"))

    def close(self):
        import logging

        if self.client is not None:
            try:
                self.client.close(timeout=10)
            except Exception:  # closing a broken connection
                pass
            self.client = None
        if self.cluster is not None:
            try:
                self.cluster.close(timeout=20)
            except Exception:  # its workers are ended anyway
                pass
            self.cluster = None
        for name, level in self._log_levels.items():
            logging.getLogger(name).setLevel(level)
        self._log_levels = {}

    # -- the stars
    def run(self, plan, todo, rows, out, redo, progress):
        from distributed import as_completed

        batch_id = uuid.uuid4().hex[:12]
        futures = {}
        self.t_submit = time.time()
        try:
            for i in todo:  # submitted in input order: Dask fits them in this order
                star, cfg = plan[i]
                fut = self.client.submit(_TASK, str(cfg), str(out / star), redo,
                                         key=f"teffmc-fit-{batch_id}-{i}", pure=False)
                futures[fut] = i
            for fut in as_completed(list(futures), loop=self.client.loop):
                i = futures.pop(fut)
                star, cfg = plan[i]
                res = self._outcome(fut)
                if res.get("interrupted"):  # only when this batch asked (see below)
                    raise KeyboardInterrupt
                if res.get("engine"):
                    self.records[star] = dict(res["engine"], fit=res.get("wall"),
                                              ok=res["ok"])
                _record(rows, i, star, cfg, res, out, progress)
                _write_tables(rows, out)
        except ClusterError:
            raise
        except BaseException:  # Ctrl-C or SIGTERM in the batch: stop the fits now
            self._stop(list(futures))
            raise

    def _outcome(self, fut):
        from concurrent.futures import CancelledError

        from distributed.scheduler import KilledWorker

        try:
            return fut.result()
        except KilledWorker:
            return {"ok": False, "wall": None, "traceback": None,
                    "reason": "internal error: the worker process died while fitting this "
                              "star, on each worker that tried it (out of memory? a crash?)"}
        except CancelledError as exc:  # only a lost connection cancels our futures
            where = self.address or "of the embedded cluster"
            raise ClusterError(f"lost the Dask scheduler {where} ({_brief(exc)}); finished "
                               "stars and checkpoints are kept: re-run the same command to "
                               "resume") from None
        except (OSError, TimeoutError) as exc:
            raise ClusterError(f"lost the Dask cluster ({_brief(exc)}); re-run the same "
                               "command to resume") from None
        except Exception as exc:  # the task could not run (e.g. teffmc missing on a worker)
            return {"ok": False, "wall": None, "traceback": traceback.format_exc(),
                    "reason": _one_line(exc)}

    def _stop(self, futures):
        """Cancel the stars not started and ask the workers to stop their fits (the
        checkpoints are kept); an embedded cluster is then closed, its workers ended."""
        try:
            if futures:
                self.client.cancel(futures, force=True)
            self.client.run(_stop_fits, wait=True, timeout=5)
        except BaseException:  # the cluster may be gone already
            pass

    # -- the engine report
    def cache_line(self):
        total = {}
        for caches in self._last_caches().values():
            for name, (hits, uses) in caches.items():
                t = total.setdefault(name, [0, 0])
                t[0] += hits
                t[1] += uses
        text = ", ".join(f"{k} {h}/{u}" for k, (h, u) in total.items())
        return f"worker caches (hits/uses, summed over {len(self._last_caches())} " \
               f"worker(s)): {text}"

    def _last_caches(self):
        last = {}
        for r in sorted(self.records.values(), key=lambda r: r["stop"]):
            last[r["worker"]] = r["caches"]
        return last

    def report(self):
        """Per worker: stars, time fitting, idle time between its stars (scheduling and
        transfer: the engine's overhead), peak memory, caches; per star: the same."""
        workers = {}
        for star, r in sorted(self.records.items(), key=lambda kv: kv[1]["start"]):
            w = workers.setdefault(r["worker"], {"stars": [], "busy_s": 0.0, "gaps_s": [],
                                                 "peak_rss_mb": 0.0, "_stop": None})
            if w["_stop"] is not None:
                w["gaps_s"].append(round(r["start"] - w["_stop"], 4))
            w["_stop"] = r["stop"]
            w["stars"].append(star)
            w["busy_s"] += r["stop"] - r["start"]
            w["peak_rss_mb"] = max(w["peak_rss_mb"], r["peak_rss_mb"])
        for name, caches in self._last_caches().items():
            workers[name]["caches"] = caches
        for w in workers.values():
            w.pop("_stop")
            w["busy_s"] = round(w["busy_s"], 3)
        return {"engine": "LocalCluster" if self.address is None else self.address,
                "submitted": self.t_submit, "workers": workers,
                "stars": {s: {k: r.get(k) for k in ("worker", "start", "stop", "fit",
                                                    "cpu", "ok", "peak_rss_mb")}
                          for s, r in self.records.items()},
                "note": "start/stop: Unix times at which the task began and ended on its "
                        "worker; fit: the fit's own wall time [s]; cpu: the worker "
                        "process's CPU time during the task [s]; gaps_s: idle time of a "
                        "worker between the end of one star and the start of the next "
                        "(Dask's scheduling and data transfer)."}

    def write_report(self, path):
        try:
            text = json.dumps(self.report(), indent=1) + "\n"
            _write_atomic(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
        except OSError:  # a report of the engine is not worth failing a batch for
            pass


def _quiet_dask():
    """Only CRITICAL messages from Dask's loggers in this process (Dask sets levels on
    some of its loggers, e.g. distributed.client); returns their levels before."""
    import logging

    names = ["distributed"] + [n for n in logging.root.manager.loggerDict
                               if n.startswith("distributed.")]
    old = {}
    for n in names:
        log = logging.getLogger(n)
        if n == "distributed" or log.level != logging.NOTSET:
            old[n] = log.level
            log.setLevel(logging.CRITICAL)
    return old


def _brief(exc):
    text = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


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
