"""Shared fixtures: a scratch copy of the example project and a headless Debian chromium."""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
from collections.abc import Callable, Iterator
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

# As Shearbook's commands do (cli.main): without rfc3987_syntax, whose 38 grammars jsonschema builds at import
# (over a second in every test process). The tests validate without a format checker, which never reads it;
# test_cli checks that a command without it still reads and validates notebooks.
sys.modules.setdefault("rfc3987_syntax", None)  # type: ignore[arg-type]  (None: "not importable", by design)


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    """The slow tests first, the live-screen browser sessions (the longest) first of all; then the others in file
    order. tests/run.sh hands tests to its workers one at a time (pytest-xdist ``--dist load --maxschedchunk 1``):
    longest first, the workers finish together instead of one waiting on the other's last browser session."""
    def rank(item: pytest.Item) -> int:
        if item.get_closest_marker("slow") is None:
            return 2
        return 0 if item.get_closest_marker("browser") and "browser" in getattr(item, "fixturenames", ()) else 1

    items.sort(key=rank)  # stable: file order kept within each rank


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


def made_once(tmp_path_factory: pytest.TempPathFactory, worker_id: str, name: str,
               make: Callable[[Path], Path]) -> Path:
    """What ``make(folder)`` writes, made once for the whole run (every xdist worker takes the same, under a file
    lock) in a folder of the run's base temp; returns what ``make`` returned (a path inside that folder)."""
    from filelock import FileLock

    base = tmp_path_factory.getbasetemp()
    shared = base if worker_id == "master" else base.parent  # the run's folder, above each worker's own
    folder, done = shared / name, shared / f"{name}.done"
    with FileLock(str(shared / f"{name}.lock")):
        if not done.is_file():
            shutil.rmtree(folder, ignore_errors=True)  # what a worker that failed half-way left
            made = make(folder)
            done.write_text(str(made.relative_to(folder)), encoding="utf-8")
    return folder / done.read_text(encoding="utf-8")


@pytest.fixture(scope="session")
def example_record(tmp_path_factory: pytest.TempPathFactory, worker_id: str) -> ExampleRecord:
    """One record of the unchanged example project for the whole run (a record takes seconds), only read by the
    tests that take it: a test that changes the project or the record makes its own."""
    from kernels_helpers.record import write_record

    def make(folder: Path) -> Path:
        root = folder / "example_project"
        shutil.copytree(EXAMPLE, root, ignore=shutil.ignore_patterns("*.ipynb", "records"))
        return write_record(root, root / "records" / "r1.html").path

    path = made_once(tmp_path_factory, worker_id, "example_record", make)
    before = {p.name: p.read_bytes() for p in (EXAMPLE / "readings").iterdir()}  # the copy's bytes, as copied
    return ExampleRecord(path.parent.parent, path, before)


@dataclass(frozen=True)
class HostileRecord:
    """A record of the example project with markup in every user text field (synthetic.hostile_project)."""

    project: Path
    path: Path


@pytest.fixture(scope="session")
def hostile_record(tmp_path_factory: pytest.TempPathFactory, worker_id: str) -> HostileRecord:
    """One record of the hostile project for the whole run, only read by the tests that take it."""
    from synthetic import hostile_project

    from kernels_helpers.record import write_record

    def make(folder: Path) -> Path:
        project = hostile_project(folder)
        return write_record(project, project / "records" / "record-hostile.html").path

    path = made_once(tmp_path_factory, worker_id, "hostile_record", make)
    return HostileRecord(path.parent.parent, path)


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
