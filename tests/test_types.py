"""The pure core type-checks clean under ``mypy --strict`` (the ``[tool.mypy]`` section of pyproject.toml)."""

from __future__ import annotations

from pathlib import Path

import pytest
from test_architecture import PACKAGE_DIR, PURE_MODULES

REPO = PACKAGE_DIR.parent


@pytest.mark.slow
def test_the_pure_core_is_strictly_typed() -> None:
    from mypy import api  # a test extra: tests/run.sh installs it
    files = [str(PACKAGE_DIR / f"{m}.py") for m in ["__init__", *PURE_MODULES]]
    stdout, stderr, status = api.run(["--config-file", str(REPO / "pyproject.toml"),
                                      "--cache-dir", str(REPO / ".mypy_cache"), *files])
    assert status == 0, f"mypy --strict on the pure core:\n{stdout}{stderr}"
    assert f"no issues found in {len(files)} source files" in stdout


def test_the_check_fails_on_a_typing_fault(tmp_path: Path) -> None:
    from mypy import api
    bad = tmp_path / "bad.py"
    bad.write_text("def f(x):\n    return x + 1\n\n\ndef g() -> int:\n    return 'text'\n", encoding="utf-8")
    stdout, _, status = api.run(["--config-file", str(REPO / "pyproject.toml"), "--no-incremental", str(bad)])
    assert status == 1
    assert "Function is missing a type annotation" in stdout and "Incompatible return value type" in stdout
