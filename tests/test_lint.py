"""The repository's ruff settings (pyproject.toml) must agree with the code."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_reports_nothing() -> None:
    paths = [ROOT / "kernels_helpers", ROOT / "tests", ROOT / "workbook", ROOT / "example_project"]
    proc = subprocess.run([sys.executable, "-m", "ruff", "check", *map(str, paths)], capture_output=True, text=True,
                          cwd=ROOT)
    assert proc.returncode == 0, f"ruff check found problems:\n{proc.stdout}{proc.stderr}"
