"""What a worker process runs for one star (a ``dask.distributed`` task).

The task never raises: a failure is a dict with a one-line reason. Work that is the same
for every star (reading the grid, Mie tables, extinction tables, filters) is cached per
process; the counters of those caches travel back with each result.
"""

import os
import socket
import threading
import time
import traceback
from pathlib import Path

from ..errors import TeffmcError

__all__ = ["fit_star", "stop_fits", "one_line", "BLAS_ENV", "PARENT_ENV"]

BLAS_ENV = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
            "BLIS_NUM_THREADS", "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")
PARENT_ENV = "TEFFMC_BATCH_PARENT"  # pid of the batch, in the embedded workers' env

_SETUP = {"limits": None}
_SETUP_LOCK = threading.Lock()


def _worker_setup():
    """Set up a worker process, once.

    One BLAS thread per fitting thread, and the batch records non-convergence as a status
    (the warning would only add noise).
    """
    with _SETUP_LOCK:
        if _SETUP["limits"] is not None:
            return
        import warnings

        from threadpoolctl import threadpool_limits

        from .. import run  # noqa: F401  (numpy, scipy, astropy, emcee: once per worker)
        from ..errors import ConvergenceWarning

        for k in BLAS_ENV:  # for libraries loaded from here on
            os.environ[k] = "1"
        _SETUP["limits"] = threadpool_limits(limits=1)  # those already loaded; kept for life
        warnings.simplefilter("ignore", ConvergenceWarning)
        parent = os.environ.get(PARENT_ENV)
        if parent and parent == str(os.getppid()):  # a worker of the embedded cluster
            threading.Thread(target=_exit_with_parent, args=(os.getppid(),),
                             daemon=True).start()


def _exit_with_parent(parent):
    """End this worker process when its parent ``parent`` (the batch) is gone.

    A worker whose batch was killed (SIGKILL) would fit the rest of its star for nobody
    (its nanny lives in the batch process).
    """
    while os.getppid() == parent:
        time.sleep(1.0)
    os._exit(1)


def _cache_counters():
    """Return the process's cache counters: {cache: [hits, uses]}."""
    from ..dust import cache as dust_cache
    from ..dust.extinction import TABLE_STATS
    from ..observe import filters
    from ..photosphere import grid_cache_info

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


def one_line(exc):
    """Return an exception as one line: its message, marked internal unless a TeffmcError."""
    msg = " ".join(str(exc).split())
    if isinstance(exc, TeffmcError):
        return msg
    return f"internal error: {type(exc).__name__}: {msg}" if msg else \
        f"internal error: {type(exc).__name__}"


def fit_star(config, out, redo):
    """Fit one star; never raises (an interrupt becomes ``{"interrupted": True}``).

    Returns a small dict: ``ok``, ``wall`` (the fit, s), ``summary`` (path) or
    ``reason`` and ``traceback``, and ``engine`` (worker, start and stop times, peak
    memory, cache counters) for the batch's engine report.
    """
    from ..interrupt import STOP

    _worker_setup()
    start, cpu0 = time.time(), time.process_time()
    t0 = time.perf_counter()
    out = Path(out)
    STOP["requested"] = False  # a stop request of an earlier batch is not for this star

    def wall():
        return round(time.perf_counter() - t0, 3)

    try:
        from ..config import load_config
        from ..run import fit

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
        res = {"ok": False, "wall": wall(), "reason": one_line(exc), "traceback": tb}
    res["engine"] = {"worker": f"{socket.gethostname()}:{os.getpid()}", "start": start,
                     "stop": time.time(), "cpu": round(time.process_time() - cpu0, 3),
                     "peak_rss_mb": round(_peak_rss_mb(), 1),
                     "caches": _cache_counters()}
    return res


def stop_fits():
    """Stop the fits of this worker (run on every worker when the batch is interrupted).

    The fits stop at their next sampler step and keep their checkpoints
    (teffmc.interrupt.STOP).
    """
    from ..interrupt import STOP

    STOP["requested"] = True

