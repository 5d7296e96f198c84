"""``teffmc report RUN_DIR [--format LIST]``: the report files of a finished run, again.

They are drawn again from the run's files by the one output path
(:mod:`teffmc.report.output`).
"""

from pathlib import Path

from .report.figures import panels_from_posterior
from .report.output import FORMATS, parse_formats, write_report
from .runfolder import run_lock

__all__ = ["panels_from_posterior", "redraw", "parse_formats", "FORMATS"]


def redraw(run_dir, formats=FORMATS):
    """Write the report files of the finished run or folder of runs ``run_dir``.

    ``formats`` defaults to all; the run's writer lock is held. Returns the written
    paths. The run's sources (posterior.nc, summary.json, run.toml, log.txt: checksummed
    by its completion marker) are only read, so a report killed midway leaves a finished
    run finished.
    """
    run_dir = Path(run_dir)
    with run_lock(run_dir):
        return write_report(run_dir, formats)
