"""Shared fixtures: a scratch copy of the example project and a headless Debian chromium."""

from __future__ import annotations

import contextlib
import os
import shutil
import sys
import tempfile
import time
import uuid
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


# The fixtures made once for the whole run (made_once): each takes seconds, and a test that needs one waits for it
MADE_ONCE = ("example_record", "hostile_record", "example_live_run", "wheel", "probes")


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    """The slow tests first, in this order: the live-screen browser sessions (the longest); then, for each shared
    fixture made once for the run (:data:`MADE_ONCE`), the first slow test that takes it, so the workers make
    different ones side by side instead of one waiting under the other's lock; then the other slow tests; then the
    rest, each rank in file order. tests/run.sh hands tests to its workers one at a time (pytest-xdist ``--dist
    load --maxschedchunk 1``): longest first, the workers finish together instead of one waiting on the other."""
    makers: dict[str, pytest.Item] = {}
    for item in items:
        if item.get_closest_marker("slow") is not None:
            for name in MADE_ONCE:
                if name in getattr(item, "fixturenames", ()):
                    makers.setdefault(name, item)

    def rank(item: pytest.Item) -> int:
        if item.get_closest_marker("slow") is None:
            return 3
        if item.get_closest_marker("browser") and "lab_server" in getattr(item, "fixturenames", ()):
            return 0
        return 1 if item in makers.values() else 2

    items.sort(key=rank)  # stable: file order kept within each rank


@dataclass(frozen=True)
class Process:
    """A live process as Linux /proc shows it (zombies left out)."""

    pid: int
    ppid: int
    session: int
    cmdline: str
    cwd: Path | None  # None where it cannot be read (another user's process, or gone meanwhile)


def live_processes() -> list[Process]:
    """Every live process of the machine (Linux /proc), read once."""
    found = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()  # fields[0]: state, [1]: parent, [3]: session
            cmdline = (stat.parent / "cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace").strip()
        except OSError:
            continue
        try:
            cwd: Path | None = Path(os.readlink(stat.parent / "cwd"))
        except OSError:
            cwd = None
        if fields[0] != "Z":
            found.append(Process(int(stat.parent.name), int(fields[1]), int(fields[3]), cmdline, cwd))
    return found


def kernels_of_this_process() -> list[int]:
    """Kernel processes started by this test process, still alive: a record stops its own."""
    return [p.pid for p in live_processes() if p.ppid == os.getpid() and "ipykernel" in p.cmdline]


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on now."""
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def wait_until(check: Callable[[], object], timeout_s: float, what: str) -> object:
    """``check()``'s first true answer, asked every 0.2 s; an AssertionError naming ``what`` after ``timeout_s``."""
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        value = check()
        if value:
            return value
        time.sleep(0.2)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")


def copy_example(dst: Path) -> Path:
    """A copy of the example project at ``dst``: its files and readings, without workbooks or records."""
    shutil.copytree(EXAMPLE, dst, ignore=shutil.ignore_patterns("*.ipynb", "records"))
    return dst


@pytest.fixture
def example_copy(tmp_path: Path) -> Path:
    """A copy of the example project (project file and readings only) that a test may change."""
    return copy_example(tmp_path / "example_project")


@dataclass(frozen=True)
class ExampleRecord:
    """A record of an unchanged copy of the example project made by the command (``shearbook record --pdf``, in a
    process of its own), its readings' bytes before the record, and what the command printed."""

    project: Path
    path: Path
    readings_before: dict[str, bytes]
    pdf: Path | None  # the A4 print (None where no Chromium is installed: the command was run without --pdf)
    stdout: str
    stderr: str


def made_once(tmp_path_factory: pytest.TempPathFactory, name: str, make: Callable[[Path], Path]) -> Path:
    """What ``make(folder)`` writes, made once for the whole run (every xdist worker takes the same, under a file
    lock) in a folder of the run's base temp; returns what ``make`` returned (a path inside that folder).

    A run without workers (``-p no:xdist``, under a debugger) makes it in its own base temp."""
    from filelock import FileLock

    base = tmp_path_factory.getbasetemp()
    shared = base.parent if os.environ.get("PYTEST_XDIST_WORKER") else base  # the run's folder, above each worker's
    folder, done = shared / name, shared / f"{name}.done"
    with FileLock(str(shared / f"{name}.lock")):
        if not done.is_file():
            shutil.rmtree(folder, ignore_errors=True)  # what a worker that failed half-way left
            made = make(folder)
            done.write_text(str(made.relative_to(folder)), encoding="utf-8")
    return folder / done.read_text(encoding="utf-8")


@pytest.fixture(scope="session")
def example_record(tmp_path_factory: pytest.TempPathFactory) -> ExampleRecord:
    """One record of the unchanged example project for the whole run (a record takes seconds), only read by the
    tests that take it: a test that changes the project or the record makes its own. Made the way an engineer
    makes one, by the command in a process of its own, printed to A4 in the same run (test_cli reads what it
    printed, test_record_browser its PDF)."""
    import subprocess

    from kernels_helpers.record import find_chromium

    def make(folder: Path) -> Path:
        root = copy_example(folder / "example_project")
        out = root / "records" / "r1.html"
        pdf = ["--pdf", str(folder / "r1-a4.pdf"), "--paper", "a4"] if find_chromium() else []
        done = subprocess.run([sys.executable, "-m", "kernels_helpers.cli", "record", str(root), "-o", str(out), *pdf],
                              capture_output=True, text=True, timeout=600, check=False)
        if done.returncode != 0:
            raise AssertionError(f"shearbook record on the example project failed ({done.returncode}): {done.stderr}")
        (folder / "command.stdout").write_text(done.stdout, encoding="utf-8")
        (folder / "command.stderr").write_text(done.stderr, encoding="utf-8")
        return out

    path = made_once(tmp_path_factory, "example_record", make)
    folder = path.parents[2]
    before = {p.name: p.read_bytes() for p in (EXAMPLE / "readings").iterdir()}  # the copy's bytes, as copied
    pdf = folder / "r1-a4.pdf"
    return ExampleRecord(path.parent.parent, path, before, pdf if pdf.is_file() else None,
                         (folder / "command.stdout").read_text(encoding="utf-8"),
                         (folder / "command.stderr").read_text(encoding="utf-8"))


# What the live screen's "compute the record part" button does, then an edit on the live screen; first, the
# interpretation file's digest as the live screen left it on opening (before anything is asked of it)
LIVE_REQUEST = (
    "import hashlib\n"
    "print('opened on', hashlib.sha256(live.controller.path.read_bytes()).hexdigest())\n"
    "live.record_part.compute()\nprint(live.record_part.stamp.value)\n"
    "live.controller.author = 'T. Tester'\nlive.controller.exclude('BH03-L3', 'disturbed')\n"
    "print(live.record_part.stamp.value)")


@dataclass(frozen=True)
class LiveRun:
    """The whole workbook template, live screen too, executed headless on an unchanged copy of the example project
    (as JupyterLab's "run all" does), then one more cell of the live screen: :data:`LIVE_REQUEST`."""

    project: Path
    notebook: Path  # the executed notebook, outputs and widget state with it
    interpretation_before: bytes  # the project's interpretation file before the run


@pytest.fixture(scope="session")
def example_live_run(tmp_path_factory: pytest.TempPathFactory) -> LiveRun:
    """One headless run of the live workbook for the whole run, only read by the tests that take it."""
    import nbformat

    from kernels_helpers.record import LIVE_TAG, execute_workbook
    from kernels_helpers.resources import workbook_template

    def make(folder: Path) -> Path:
        root = copy_example(folder / "example_project")
        nb = nbformat.read(workbook_template(), as_version=4)
        nb.cells.append(nbformat.v4.new_code_cell(LIVE_REQUEST, metadata={"tags": [LIVE_TAG]}))
        template = folder / "with_request.ipynb"
        nbformat.write(nb, template)
        out = folder / "live.ipynb"
        nbformat.write(execute_workbook(root, template=template, live=True), out)
        return out

    path = made_once(tmp_path_factory, "example_live_run", make)
    return LiveRun(path.parent / "example_project", path, (EXAMPLE / "interpretation.json").read_bytes())


@dataclass(frozen=True)
class HostileRecord:
    """A record of the example project with markup in every user text field (synthetic.hostile_project)."""

    project: Path
    path: Path


@pytest.fixture(scope="session")
def hostile_record(tmp_path_factory: pytest.TempPathFactory) -> HostileRecord:
    """One record of the hostile project for the whole run, only read by the tests that take it."""
    from synthetic import hostile_project

    from kernels_helpers.record import write_record

    def make(folder: Path) -> Path:
        project = hostile_project(folder)
        return write_record(project, project / "records" / "record-hostile.html").path

    path = made_once(tmp_path_factory, "hostile_record", make)
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


# --- JupyterLab for the live-screen browser tests -----------------------------------------------------------

LAB_SETTINGS = {  # no news prompt over the page; every cell kept in the page (no windowed notebook)
    "@jupyterlab/apputils-extension/notification.jupyterlab-settings": {"fetchNews": "false"},
    "@jupyterlab/notebook-extension/tracker.jupyterlab-settings": {"windowingMode": "none"},
}


@dataclass(frozen=True)
class LabServer:
    """One JupyterLab on 127.0.0.1 for a test worker's browser sessions, serving the worker's temp folder (every
    test's project is under it), with configuration folders of its own."""

    root: Path
    url: str

    def _api(self, method: str, path: str) -> object:
        """A call to the server's REST API, with the XSRF cookie and header it asks of every change."""
        import json
        import urllib.request
        from http.cookiejar import CookieJar

        jar = CookieJar()
        opener = urllib.request.build_opener(urllib.request.HTTPCookieProcessor(jar))
        opener.open(f"{self.url}/lab", timeout=30).close()  # the server sets its _xsrf cookie
        xsrf = next((c.value for c in jar if c.name == "_xsrf"), "")
        request = urllib.request.Request(f"{self.url}/api/{path}", method=method, headers={"X-XSRFToken": xsrf})
        with opener.open(request, timeout=30) as answer:
            body = answer.read()
        return json.loads(body) if body else None

    @contextlib.contextmanager
    def workbook(self, project: Path) -> Iterator[str]:
        """The URL of ``project``'s workbook (copied into it), in a workspace of its own, so nothing an earlier
        session opened is restored beside it; on leaving, every kernel the session started is shut down."""
        from urllib.parse import quote

        from kernels_helpers.cli import workbook_in_project

        notebook = workbook_in_project(project).resolve().relative_to(self.root)
        workspace = f"sb{uuid.uuid4().hex[:12]}"
        try:
            yield f"{self.url}/lab/workspaces/{workspace}/tree/{quote(notebook.as_posix())}"
        finally:
            sessions = self._api("GET", "sessions")
            assert isinstance(sessions, list)
            for session in sessions:
                self._api("DELETE", f"sessions/{session['id']}")  # its kernel too
            assert self._api("GET", "kernels") == [], "a kernel of the browser session outlived it"


@contextlib.contextmanager
def running_lab(root: Path, scratch: Path) -> Iterator[LabServer]:
    """JupyterLab serving ``root``, with fresh configuration folders in ``scratch``; stopped by PID on leaving."""
    import json
    import subprocess
    import urllib.request

    root = root.resolve()
    env = {**os.environ, "JUPYTER_CONFIG_DIR": str(scratch / "config"), "JUPYTER_RUNTIME_DIR": str(scratch / "runtime"),
           "JUPYTERLAB_SETTINGS_DIR": str(scratch / "settings"),
           "JUPYTERLAB_WORKSPACES_DIR": str(scratch / "workspaces")}
    for rel, value in LAB_SETTINGS.items():
        path = scratch / "settings" / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(value), encoding="utf-8")
    port = free_port()
    log_path = scratch / "lab.log"
    with log_path.open("w") as log:
        proc = subprocess.Popen(
            [sys.executable, "-m", "jupyterlab", "--no-browser", "--ServerApp.token=", "--ServerApp.password=",
             "--ServerApp.ip=127.0.0.1", f"--port={port}", "--ServerApp.port_retries=0",
             f"--ServerApp.root_dir={root}", "--LabApp.expose_app_in_browser=True", "--ServerApp.allow_root=True"],
            env=env, stdout=log, stderr=subprocess.STDOUT, cwd=root)
        try:
            def ready() -> bool:
                if proc.poll() is not None:
                    raise AssertionError(f"JupyterLab exited: {log_path.read_text(encoding='utf-8')}")
                try:
                    with urllib.request.urlopen(f"http://127.0.0.1:{port}/api/status", timeout=2) as r:
                        return r.status == 200
                except OSError:
                    return False
            wait_until(ready, 60, "JupyterLab to answer")
            yield LabServer(root, f"http://127.0.0.1:{port}")
        finally:
            proc.terminate()
            try:
                proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()


@pytest.fixture(scope="session")
def lab_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[LabServer]:
    """Started once per worker, on its first live-screen test, and stopped at the end of the run: it serves the
    worker's temp folder, so every test's project is under it."""
    with running_lab(tmp_path_factory.getbasetemp(), tmp_path_factory.mktemp("jupyterlab")) as server:
        yield server
