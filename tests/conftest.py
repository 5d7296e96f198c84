import numpy as np
import pytest


@pytest.fixture
def rng():
    return np.random.default_rng(12345)


@pytest.fixture(scope="session")
def report_run(tmp_path_factory):
    """A finished two-epoch, two-hypothesis run with its report (tests/report_run.py):
    ``(folder of the hypotheses, FitResult of the best)``. Shared by the report tests."""
    from report_run import make_report_run

    folder = tmp_path_factory.mktemp("report")
    res = make_report_run(folder)
    return folder / "run", res
