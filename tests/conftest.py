"""Shared fixtures: a scratch copy of the example project and a headless Debian chromium."""

from __future__ import annotations

import os
import shutil
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
EXAMPLE = REPO / "example_project"
CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
    "--disable-component-update", "--disable-sync",
]
ARTIFACTS = REPO / "test-artifacts"


@pytest.fixture
def example_copy(tmp_path: Path) -> Path:
    """A copy of the example project (project file and readings only) that a test may change."""
    dst = tmp_path / "example_project"
    shutil.copytree(EXAMPLE, dst, ignore=shutil.ignore_patterns("*.ipynb", "records"))
    return dst


@dataclass(frozen=True)
class ExampleRecord:
    """A record of an unchanged copy of the example project, and its readings' bytes before the record."""

    project: Path
    path: Path
    readings_before: dict[str, bytes]


@pytest.fixture(scope="session")
def example_record(tmp_path_factory: pytest.TempPathFactory) -> ExampleRecord:
    """One record of the unchanged example project per test process (a record takes seconds), only read by the
    tests that take it: a test that changes the project or the record makes its own."""
    from kernels_helpers.record import write_record

    root = tmp_path_factory.mktemp("example_record") / "example_project"
    shutil.copytree(EXAMPLE, root, ignore=shutil.ignore_patterns("*.ipynb", "records"))
    before = {p.name: p.read_bytes() for p in (root / "readings").iterdir()}
    return ExampleRecord(root, write_record(root, root / "records" / "r1.html").path, before)


@dataclass(frozen=True)
class HostileRecord:
    """A record of the example project with markup in every user text field (synthetic.hostile_project)."""

    project: Path
    path: Path


@pytest.fixture(scope="session")
def hostile_record(tmp_path_factory: pytest.TempPathFactory) -> HostileRecord:
    """One record of the hostile project per test process, only read by the tests that take it."""
    from synthetic import hostile_project

    from kernels_helpers.record import write_record

    project = hostile_project(tmp_path_factory.mktemp("hostile_record"))
    return HostileRecord(project, write_record(project, project / "records" / "record-hostile.html").path)


@pytest.fixture(scope="session")
def browser() -> Iterator[object]:
    """Headless Debian chromium driven by Playwright. In CI a missing browser fails, never skips."""
    if not CHROMIUM.exists():
        if os.environ.get("CI"):
            pytest.fail("Debian chromium is missing in CI: tests/run.sh installs it with apt-get")
        pytest.skip("Debian chromium not installed (tests/run.sh installs it)")
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw, tempfile.TemporaryDirectory() as profile:
        context = pw.chromium.launch_persistent_context(
            profile, executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS,
            viewport={"width": 1400, "height": 1000}
        )
        yield context
        context.close()


@pytest.fixture
def artifacts() -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    return ARTIFACTS
