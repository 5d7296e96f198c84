"""The Dask side of a batch: an embedded ``LocalCluster`` or a running scheduler.

The same task submission and result handling for both, and the engine report
(batch-engine.json).
"""

import json
import os
import time
import traceback
import uuid
from pathlib import Path

from ..errors import ClusterError
from .tables import write_atomic
from .task import BLAS_ENV, PARENT_ENV, fit_star, one_line, stop_fits

__all__ = ["Engine", "ALLOWED_FAILURES", "CONNECT_TIMEOUT"]

#: deaths of workers fitting the same star that the embedded cluster forgives
ALLOWED_FAILURES = 2
CONNECT_TIMEOUT = 30.0  # [s] to reach an existing scheduler
TASK = fit_star  # what the workers run per star (a test replaces it to kill a worker)


def _dashboard(client):
    """Return the address of the Dask dashboard if it serves its pages, else None.

    The pages need bokeh.
    """
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


class Engine:
    """The Dask side of a batch: a ``LocalCluster`` or a client of a running scheduler.

    An embedded ``LocalCluster`` of ``workers`` processes, or a client of the running
    scheduler at ``address``; the same task, submission and result handling for both.
    """

    def __init__(self, workers, address):
        self.workers, self.address = workers, address
        self.cluster = self.client = None
        self.dashboard = None
        self.records = {}  # star -> the task's engine dict (worker, start, stop, ...)
        self.t_submit = None
        self._log_levels = {}

    # -- start and stop
    def start(self):
        """Start the embedded cluster or connect to the scheduler (ClusterError if not)."""
        import logging

        import dask
        from distributed import Client, LocalCluster

        # the batch says what went wrong with a star or the cluster, in one line; Dask's
        # client would add its tracebacks (a lost scheduler, a worker that died)
        self._log_levels = _quiet_dask()
        if self.address is None:
            env = {k: "1" for k in BLAS_ENV}
            env[PARENT_ENV] = str(os.getpid())
            # worker-saturation 1.0: with more stars than twice the threads, Dask keeps
            # them queued on the scheduler and a worker holds only the star it fits, so a
            # dying worker takes no innocent star down with it (see ALLOWED_FAILURES)
            # worker profile off: Dask's statistical profiler samples the fitting thread
            # every 10 ms, and a star then cost 11-13 s of CPU instead of 6-8 s in a
            # 50-star batch on one worker (bench/bench_batch.py, README)
            with dask.config.set({"distributed.scheduler.worker-saturation": 1.0,
                                  "distributed.scheduler.allowed-failures": ALLOWED_FAILURES,
                                  "distributed.worker.profile.enabled": False}):
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
        """Return one line on the workers: count, and for a scheduler its threads now."""
        if self.address is None:
            return f"{self.workers} worker(s) (Dask LocalCluster)"
        info = self.client.scheduler_info()
        n = len(info.get("workers", {}))
        threads = sum(w.get("nthreads", 0) for w in info.get("workers", {}).values())
        return (f"Dask scheduler {self.address} with {n} worker(s), {threads} thread(s) now"
                + ("" if n else ": stars wait for its workers"))

    def close(self):
        """Close the client and an embedded cluster; restore Dask's log levels."""
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
    def run(self, plan, todo, out, redo, on_result):
        """Fit the stars ``plan[i]`` for ``i`` in ``todo`` into ``out/<star>``.

        ``on_result(i, res)`` is called as each one ends, in the order they end.
        """
        from distributed import as_completed

        batch_id = uuid.uuid4().hex[:12]
        futures = {}
        self.t_submit = time.time()
        try:
            for i in todo:  # submitted in input order: Dask fits them in this order
                star, cfg = plan[i]
                fut = self.client.submit(TASK, str(cfg), str(out / star), redo,
                                         key=f"teffmc-fit-{batch_id}-{i}", pure=False)
                futures[fut] = i
            for fut in as_completed(list(futures), loop=self.client.loop):
                i = futures.pop(fut)
                res = self._outcome(fut)
                if res.get("interrupted"):  # only when this batch asked (see below)
                    raise KeyboardInterrupt
                if res.get("engine"):
                    self.records[plan[i][0]] = dict(res["engine"], fit=res.get("wall"),
                                                    ok=res["ok"])
                on_result(i, res)
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
                    "reason": one_line(exc)}

    def _stop(self, futures):
        """Cancel the stars not started and ask the workers to stop their fits.

        The checkpoints are kept; an embedded cluster is then closed, its workers ended.
        """
        try:
            if futures:
                self.client.cancel(futures, force=True)
            self.client.run(stop_fits, wait=True, timeout=5)
        except BaseException:  # the cluster may be gone already
            pass

    # -- the engine report
    def cache_line(self):
        """Return one line of the worker caches' hits/uses, summed over the workers."""
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
        """Return the engine report (batch-engine.json) as a dict.

        Per worker: stars, time fitting, idle time between its stars (scheduling and
        transfer: the engine's overhead), peak memory, caches; per star: the same.
        """
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
        """Write :meth:`report` as JSON to ``path`` atomically; an OSError is ignored."""
        try:
            text = json.dumps(self.report(), indent=1) + "\n"
            write_atomic(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
        except OSError:  # a report of the engine is not worth failing a batch for
            pass


def _quiet_dask():
    """Let only CRITICAL messages through Dask's loggers in this process.

    Dask sets levels on some of its loggers (e.g. distributed.client). Returns their
    levels before.
    """
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
