"""The code passes the project's lint rules (ruff, configured in pyproject.toml)."""

import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_is_clean():
    ruff = shutil.which("ruff") or str(Path(sys.executable).with_name("ruff"))
    res = subprocess.run([ruff, "check", "teffmc", "tests", "bench"], cwd=ROOT,
                         capture_output=True, text=True, check=False)
    assert res.returncode == 0, res.stdout + res.stderr
