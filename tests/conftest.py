import fcntl

import numpy as np
import pytest


@pytest.fixture
def rng():
    return np.random.default_rng(12345)


@pytest.fixture(scope="session")
def report_run(tmp_path_factory, worker_id):
    """A finished two-epoch, two-hypothesis run with its report (tests/report_run.py):
    the folder of the hypotheses. Shared by the report tests.

    Under pytest-xdist (``-n``) the test files using it may run in different worker
    processes; the run is made once, in the folder all workers share, under a file
    lock (the pattern of pytest-xdist's documentation), and reused by the others.
    """
    from report_run import make_report_run

    root = tmp_path_factory.getbasetemp()
    if worker_id != "master":
        root = root.parent  # the base folder shared by all workers of this session
    folder = root / "report-run"
    with open(root / "report-run.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        try:
            if not (folder / "done").exists():
                folder.mkdir(exist_ok=True)
                make_report_run(folder)
                (folder / "done").write_text("ok")
        finally:
            fcntl.flock(lock, fcntl.LOCK_UN)
    return folder / "run"
