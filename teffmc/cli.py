"""Command line: ``teffmc demo | fit | batch | compare | report | grid``.

Exit codes: 0 success; 2 bad input (one line naming file, key or column, and the
value; no traceback); 1 internal error, or for ``batch``: at least one star failed or
the Dask cluster was lost (:class:`~teffmc.errors.ClusterError`);
130 interrupted by Ctrl-C or, for ``fit`` and ``batch``, SIGTERM (one line saying how
to resume).
"""

import argparse
import shlex
import signal
import sys
import threading
import warnings
from contextlib import contextmanager, nullcontext
from pathlib import Path

from . import __version__
from .errors import ClusterError, ConvergenceWarning, TeffmcError

__all__ = ["main"]


def _cmd_fit(args):
    from .run import fit, summary_to_text

    res = fit(args.config, args.out, resume=args.resume, quiet=args.quiet,
              overwrite=args.overwrite)
    print(summary_to_text(res.summary))
    print(f"run folder: {res.out}")
    return 0


def _cmd_batch(args):
    from .batch import fit_many, read_config_list

    configs = [Path(c) for c in args.configs]
    for lst in args.list or []:
        configs += read_config_list(lst)
    table = fit_many(configs, args.out, workers=args.workers, redo=args.redo,
                     quiet=args.quiet, scheduler=args.scheduler, netcdf=args.netcdf)
    return 1 if any(s == "failed" for s in table["status"]) else 0


@contextmanager
def _sigterm_as_interrupt():
    """Make SIGTERM (a job scheduler's stop) raise KeyboardInterrupt, as Ctrl-C does.

    The same clean stop (``batch`` stops its workers and keeps its table, ``fit`` keeps
    its checkpoint), one line, exit 130. Only the main thread may set signal handlers.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    from .interrupt import STOP, request_stop

    STOP["requested"] = False
    sigs = [signal.SIGTERM]
    if signal.getsignal(signal.SIGINT) is signal.default_int_handler:  # not when ignored
        sigs.append(signal.SIGINT)  # the same handler: see teffmc.interrupt.STOP
    old = {s: signal.signal(s, request_stop) for s in sigs}
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        STOP["requested"] = False


def _interrupted(args):
    """Return the line printed on Ctrl-C or SIGTERM: what was kept and how to go on."""
    if args.command == "batch":
        return "interrupted; finished stars and checkpoints are kept: re-run the same " \
               "command to resume"
    if args.command != "fit":
        return "interrupted"
    from .run import default_out

    out = Path(args.out) if args.out else default_out(args.config)
    resume = f"`teffmc fit {shlex.quote(args.config)} --out {shlex.quote(str(out))} --resume`"
    kept = [str(p.parent) for p in [out.with_name(out.name + ".partial") / "chain.h5",
                                    *sorted(out.glob("*.partial/chain.h5"))] if p.is_file()]
    if kept:
        return (f"interrupted; the checkpoint is kept in {', '.join(kept)}: resume with "
                f"{resume}")
    finished = [p.parent.name for p in sorted(out.glob("*/summary.json"))]
    if finished and not any((out / f).is_file() for f in ("compare.json", "stack.json")):
        return (f"interrupted; the finished runs {', '.join(finished)} are kept in {out}: "
                f"resume with {resume}")
    return "interrupted before the first checkpoint, nothing was kept: run the same " \
           "command again"


def _cmd_demo(args):
    from .demo import run_demo

    return run_demo(Path(args.out), quiet=args.quiet)


def _cmd_report(args):
    from .rereport import FORMATS, parse_formats, redraw

    formats = parse_formats(args.format) if args.format is not None else list(FORMATS)
    written = redraw(Path(args.run_dir), formats)
    print(f"{len(written)} files written in {args.run_dir}: "
          + ", ".join(sorted({p.name for p in written})))
    return 0


def _cmd_compare(args):
    from .compare import compare_runs

    res = compare_runs([Path(d) for d in args.run_dirs], Path(args.out) if args.out else None)
    print(res.text)
    return 0


def _cmd_grid(args):
    from .photosphere import load_grid

    if args.grid_cmd == "info":
        print(load_grid(args.file).describe())
        return 0
    if args.grid_cmd == "build":
        from .photosphere.synth import build_grid

        build_grid(args.out, workers=args.workers, nuisance=not args.no_nuisance,
                   progress=True)
        print(load_grid(args.out).describe())
        return 0
    from .photosphere.importer import import_grid

    grid = import_grid(Path(args.folder), Path(args.table), air=args.air,
                       flux_unit=args.flux_unit, wave_unit=args.wave_unit)
    grid.write(args.out)
    print(grid.describe())
    return 0


def build_parser():
    """Build the argparse parser of every command (one `_add_<command>` each)."""
    p = argparse.ArgumentParser(prog="teffmc", description=(
        "Effective temperature of a cool star with honest uncertainties, jointly with "
        "interstellar extinction and a circumstellar dust veil."))
    p.add_argument("--version", action="version", version=f"teffmc {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    for add in (_add_demo, _add_fit, _add_batch, _add_compare, _add_report, _add_grid):
        add(sub)
    return p


def _add_demo(sub):
    """`teffmc demo`."""
    d = sub.add_parser("demo", help="make the invented demo star's data and fit it")
    d.add_argument("--out", default="teffmc-demo",
                   help="folder for the demo (default: %(default)s)")
    d.add_argument("--quiet", action="store_true", help="no progress output")
    d.set_defaults(func=_cmd_demo)


def _add_fit(sub):
    """`teffmc fit`."""
    f = sub.add_parser("fit", help="fit the data described by a TOML config file")
    f.add_argument("config", help="TOML config file")
    f.add_argument("--out", help="run folder (default: run-<config name> beside the config)")
    f.add_argument("--resume", action="store_true", help="continue an interrupted run")
    f.add_argument("--overwrite", action="store_true",
                   help="replace the run already in the run folder (it is kept until the "
                   "new run is finished)")
    f.add_argument("--quiet", action="store_true", help="no progress bar or log lines")
    f.set_defaults(func=_cmd_fit)


def _add_batch(sub):
    """`teffmc batch`."""
    b = sub.add_parser(
        "batch", help="fit many stars, one config each, into OUT/<config stem>/",
        description="Fit many stars (one config file each) as tasks on a Dask cluster (an "
        "embedded one of --workers processes, or a running one with --scheduler), each "
        "star into OUT/<config file stem>/, with one table OUT/batch.ecsv and the same as "
        "OUT/batch.parquet (a row per star: "
        "status, reason, wall time, steps, median and 16th/84th percentiles of every "
        "parameter) and the progress lines in OUT/batch.log. Stars whose folder already "
        "holds a finished run are skipped, so re-running the same command resumes an "
        "interrupted batch.",
        epilog="exit status: 0 every star has a finished run (rows with status "
        "not_converged are runs that did not converge: see their caution); 1 at least one "
        "star failed (status failed, the reason in the table and the log; the other stars "
        "were fitted), or the Dask cluster was lost (re-run the same command to resume); "
        "2 bad batch input (no configs, two configs with the same file stem, "
        "unreadable --list file), nothing done; 130 interrupted (re-run the same command to "
        "resume).")
    b.add_argument("configs", nargs="*", metavar="CONFIG", help="TOML config files")
    b.add_argument("--list", action="append", metavar="FILE",
                   help="text file with one config path a line (relative paths: from the "
                   "file's folder); may be repeated")
    b.add_argument("--out", required=True, help="folder for the runs and batch.ecsv")
    b.add_argument("--workers", type=int, default=None,
                   help="stars fitted at the same time on this machine: processes of an "
                   "embedded Dask cluster, one thread and one BLAS thread each (default: 1)")
    b.add_argument("--scheduler", metavar="ADDRESS",
                   help="fit the stars on the workers of a running Dask scheduler (e.g. "
                   "tcp://host:8786) instead; every worker must see --out")
    b.add_argument("--redo", action="store_true",
                   help="fit again stars whose folder holds a finished run")
    b.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
    b.add_argument("--netcdf", action="store_true",
                   help="also write OUT/batch-summaries.nc: every star's posterior summaries "
                   "(median, p16, p84, mean, sd, r_hat, ess_bulk of every parameter and "
                   "derived quantity) in one netCDF file, dimension star")
    b.set_defaults(func=_cmd_batch)


def _add_compare(sub):
    """`teffmc compare`."""
    c = sub.add_parser("compare", help="compare hypotheses fitted to the same data")
    c.add_argument("run_dirs", nargs="+", help="run folders written by `teffmc fit`")
    c.add_argument("--out", help="folder for compare.json, compare.ecsv and the comparison's "
                   "report (hypotheses/budget figures, compare_table.tex, report.html)")
    c.set_defaults(func=_cmd_compare)


def _add_report(sub):
    """`teffmc report`."""
    r = sub.add_parser("report", help="write the report files of a finished run (figures, "
                       "paper tables, methods paragraph, report.html)")
    r.add_argument("run_dir", help="a run folder, or a folder of hypotheses or grids")
    r.add_argument("--format", metavar="LIST",
                   help="a comma-separated list (default: all): pdf, png (figures: corner, "
                   "fit, diagnostics, and with several epochs budget and delta_teff; with a "
                   "comparison hypotheses), tex (table.tex, table_aastex.tex, methods.tex, "
                   "references.bib), md (methods.md), csv (table.csv), html (report.html, "
                   "self-contained); summary.ecsv is always rewritten")
    r.set_defaults(func=_cmd_report)


def _add_grid(sub):
    """`teffmc grid info|build|import`."""
    g = sub.add_parser("grid", help="build, import or describe a photosphere grid")
    gs = g.add_subparsers(dest="grid_cmd", required=True)
    gi = gs.add_parser("info", help="describe a grid file")
    gi.add_argument("file", nargs="?", default="builtin",
                    help="grid file, 'builtin' or 'blackbody' (default: builtin)")
    gb = gs.add_parser("build", help="compute the built-in grid with teffmc's LTE synthesis")
    gb.add_argument("--out", required=True, help="output grid file (.h5)")
    gb.add_argument("--workers", type=int, default=2, help="processes (default: %(default)s)")
    gb.add_argument("--no-nuisance", action="store_true",
                    help="skip the nuisance axes (TiO and line-haze scales; 4 more grids)")
    gm = gs.add_parser("import", help="make a grid file from a folder of model spectra")
    gm.add_argument("folder", help="folder holding the spectra (FITS or text tables)")
    gm.add_argument("table", help="table (ECSV/CSV) with columns file, teff, logg, mh")
    gm.add_argument("--out", required=True, help="output grid file (.h5)")
    gm.add_argument("--air", action="store_true", help="wavelengths are in air")
    gm.add_argument("--wave-unit", help="wavelength unit when the files do not say")
    gm.add_argument("--flux-unit", help="flux-density unit when the files do not say")
    g.set_defaults(func=_cmd_grid)


def _one_line_warnings(message, category, filename, lineno, file=None, line=None):
    """Show teffmc's own warnings (e.g. not converged) as one plain line.

    Without the source line a Python warning shows; others as Python shows them.
    """
    if issubclass(category, ConvergenceWarning):
        print(f"teffmc: warning: {' '.join(str(message).split())}",
              file=file if file is not None else sys.stderr)
    else:
        _show_warning(message, category, filename, lineno, file, line)


_show_warning = warnings.showwarning


def main(argv=None):
    """Run the ``teffmc`` command line on ``argv`` (default: sys.argv) and return its exit code.

    0 on success, 2 for an input error (one line on stderr), 1 when a Dask cluster fails
    or a batch has a failed star, 130 on Ctrl-C or SIGTERM.
    """
    args = build_parser().parse_args(argv)
    old_show, warnings.showwarning = warnings.showwarning, _one_line_warnings
    try:
        with _sigterm_as_interrupt() if args.command in ("fit", "batch") else nullcontext():
            return args.func(args)
    except ClusterError as exc:  # not the input's fault: exit 1
        print(f"teffmc: error: {' '.join(str(exc).split())}", file=sys.stderr)
        return 1
    except TeffmcError as exc:
        msg = " ".join(str(exc).split())
        print(f"teffmc: error: {msg}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"teffmc: {_interrupted(args)}", file=sys.stderr)
        return 130
    finally:
        warnings.showwarning = old_show


if __name__ == "__main__":
    sys.exit(main())
