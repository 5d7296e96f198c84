"""Survey mode: many stars, one config file each, fitted as tasks on a Dask cluster.

``fit_many`` (and ``teffmc batch``) fits every config into ``OUT/<config file stem>/``
and keeps one table, ``OUT/batch.ecsv`` (and the same as ``OUT/batch.parquet``), with a
row per star. Design:

- one code path for every place a survey runs: each star is one ``dask.distributed``
  task (:func:`.task.fit_star`). By default the batch starts an embedded ``LocalCluster`` of
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
  star on which :data:`.engine.ALLOWED_FAILURES` + 1 workers died in turn is recorded
  as failed (embedded cluster; an external cluster uses its own ``allowed-failures`` setting);
- any exception in one star (bad config, bad data, a prior off the grid, a bug) is
  recorded as status "failed" with a one-line reason; the other stars go on;
- a lost cluster (scheduler unreachable or killed) stops the batch with one line
  (:class:`~teffmc.errors.ClusterError`, exit 1); what was finished is kept and
  re-running the command resumes;
- the tables are rewritten atomically (temporary file + ``os.replace``) whenever a star
  finishes, so a killed batch leaves valid tables (unfinished stars "pending");
- the numbers in the table are copied from each run's ``summary.json``, never
  recomputed;
- optionally (``netcdf=True``, ``--netcdf``) every star's posterior summaries go into one
  netCDF file, ``OUT/batch-summaries.nc`` (:mod:`.netcdf`), written after the batch and
  at most once a minute while it runs.

Modules: :mod:`.plan` (the list file, one star per config stem, finished runs),
:mod:`.task` (what a worker runs per star), :mod:`.engine` (the Dask cluster or client,
submission, results, the engine report), :mod:`.tables` (batch.ecsv and batch.parquet),
:mod:`.netcdf` (batch-summaries.nc),
:mod:`.driver` (``fit_many``: the batch in the main process, its log).
"""

from .driver import STATUSES, fit_many
from .plan import finished_summary, read_config_list

__all__ = ["fit_many", "read_config_list", "finished_summary", "STATUSES"]
