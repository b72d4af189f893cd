"""The built wheel is a working tool from any folder; the package lists every subpackage and data file.

The wheel test builds the wheel from this checkout, installs it (and only it) into a fresh virtual
environment, and runs ``results``, ``record``, ``verify`` and the start-up of ``open`` on a copy of the
example project in a temporary folder outside the checkout. The fresh environment reaches the
dependencies through a ``.pth`` line naming this environment's site-packages (a folder named there
is put on sys.path, but its own .pth files, among them the editable install's hook, are not run),
so the package under test is the wheel's copy, which the test asserts. The dependencies' data files
(nbconvert's templates, JupyterLab's application) are found the same way, through JUPYTER_PATH and
JUPYTERLAB_DIR naming this environment's share/jupyter. Installing every dependency again from the
registry would test pip, not Shearbook, and cost a minute.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import sysconfig
import tomllib
import urllib.request
import venv
import zipfile
from pathlib import Path

import pytest
from conftest import copy_example, free_port, live_processes

pytestmark = pytest.mark.slow  # a wheel built, installed in a new environment and run

REPO = Path(__file__).resolve().parents[1]
PACKAGE = REPO / "kernels_helpers"


def _pyproject() -> dict:
    return tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))


def test_every_subpackage_is_listed_in_pyproject() -> None:
    """Every folder of the package that holds a file (code or data) is a listed package: nothing left out."""
    listed = set(_pyproject()["tool"]["setuptools"]["packages"])
    on_disk = {".".join(("kernels_helpers", *p.parent.relative_to(PACKAGE).parts))
               for p in PACKAGE.rglob("*") if p.is_file() and "__pycache__" not in p.parts}
    assert listed == on_disk | {"kernels_helpers.workbook"}


@pytest.fixture(scope="session")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The checkout's wheel, built once for the run (the test processes share it)."""
    from conftest import made_once

    def build(dist: Path) -> Path:
        subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "--quiet",
                        "--wheel-dir", str(dist), str(REPO)], check=True, capture_output=True, timeout=300)
        (found,) = dist.glob("shearbook-*.whl")
        return found

    return made_once(tmp_path_factory, "wheel", build)


def test_the_wheel_ships_the_templates_and_no_tests(wheel: Path) -> None:
    names = set(zipfile.ZipFile(wheel).namelist())
    for shipped in ("kernels_helpers/workbook/shear_interpretation.ipynb", "kernels_helpers/workbook/make_template.py",
                    "kernels_helpers/templates/shearbook_record/index.html.j2",
                    "kernels_helpers/templates/shearbook_record/conf.json", "kernels_helpers/py.typed",
                    "kernels_helpers/schemas/project.schema.json",
                    "kernels_helpers/schemas/interpretation.schema.json"):
        assert shipped in names
    assert not [n for n in names if n.startswith(("tests/", "example_project/", "workbook/"))]


@pytest.fixture(scope="module")
def fresh_env(wheel: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A new virtual environment holding the wheel; the dependencies come from this environment."""
    env = tmp_path_factory.mktemp("fresh") / "venv"
    venv.create(env, with_pip=False)
    python = env / "bin" / "python"
    purelib = subprocess.run([str(python), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                             capture_output=True, text=True, check=True).stdout.strip()
    (Path(purelib) / "_shearbook_test_dependencies.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    subprocess.run([sys.executable, "-m", "pip", "--python", str(python), "install", "--quiet", "--no-deps",
                    "--no-index", str(wheel)], check=True, capture_output=True, timeout=300)
    return env


def _environment(env: Path) -> dict[str, str]:
    """The environment of a command run from the fresh install: its bin first, the dependencies' data files."""
    clean = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    share = Path(sysconfig.get_paths()["data"]) / "share" / "jupyter"
    return {**clean, "PATH": f"{env / 'bin'}:{clean['PATH']}", "JUPYTER_PATH": str(share),
            "JUPYTERLAB_DIR": str(share / "lab")}


def _run(env: Path, cwd: Path, *args: str, check: bool = True) -> subprocess.CompletedProcess[str]:
    return subprocess.run([str(env / "bin" / "shearbook"), *args], cwd=cwd, capture_output=True, text=True,
                          timeout=600, check=check, env=_environment(env))


def _assert_quiet(done: subprocess.CompletedProcess[str]) -> None:
    """Only Shearbook's own lines: no library's log line, warning or traceback."""
    text = done.stdout + done.stderr
    for noise in ("[IPKernelApp]", "WARNING", "Warning:", "Traceback", "[I ", "[W "):
        assert noise not in text, text


def test_the_installed_wheel_runs_results_record_verify_and_open_outside_the_checkout(
        fresh_env: Path, tmp_path: Path) -> None:
    where = subprocess.run([str(fresh_env / "bin" / "python"), "-c", "import kernels_helpers; "
                            "print(kernels_helpers.__file__)"], cwd=tmp_path, capture_output=True, text=True,
                           check=True).stdout.strip()
    assert Path(where).is_relative_to(fresh_env), where  # the wheel's copy, not this checkout
    project = copy_example(tmp_path / "Port Wendle project")  # a space in the path, as on many engineers' machines
    results = _run(fresh_env, tmp_path, "results", str(project))
    assert json.loads(results.stdout)["schema"] == "shearbook.results/1"
    # -q: not one line, so nothing the kernel or the exporters print leaks out (what a record prints without -q
    # is checked on the checkout's command in test_cli)
    quiet = _run(fresh_env, tmp_path, "record", str(project), "-o", str(tmp_path / "rec.html"), "-q")
    assert (quiet.stdout, quiet.stderr) == ("", "")
    verify = _run(fresh_env, tmp_path, "verify", str(tmp_path / "rec.html"), "--project", str(project))
    _assert_quiet(verify)
    assert " MATCH - " in verify.stdout and "bit-identical" in verify.stdout
    _open_starts(fresh_env, project)


def _open_starts(env: Path, project: Path) -> None:
    """``shearbook open`` copies the workbook, serves it, and prints only its own two lines."""
    port = free_port()
    scratch = project.parent
    env_vars = {**_environment(env), "JUPYTER_RUNTIME_DIR": str(scratch / "jrun"),
                "JUPYTER_CONFIG_DIR": str(scratch / "jcfg"),
                "JUPYTERLAB_SETTINGS_DIR": str(scratch / "jlab"), "JUPYTERLAB_WORKSPACES_DIR": str(scratch / "jws")}
    server = subprocess.Popen([str(env / "bin" / "shearbook"), "open", str(project), "--no-browser", "--port",
                               str(port)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env_vars,
                              start_new_session=True)
    try:
        assert server.stdout is not None
        first = server.stdout.readline()  # printed once the server answers
        assert first.startswith(f"Workbook: http://127.0.0.1:{port}/lab/tree/shear_interpretation.ipynb?token="), first
        with urllib.request.urlopen(first.split(" ", 1)[1].strip(), timeout=30) as page:
            assert page.status == 200
        assert (project / "shear_interpretation.ipynb").is_file()
        # no news pop-up over the live screen: the session's settings turn news and update checks off
        token = first.split("token=", 1)[1].strip()
        api = f"http://127.0.0.1:{port}/lab/api/settings/@jupyterlab/apputils-extension:notification?token={token}"
        with urllib.request.urlopen(api, timeout=30) as reply:
            answer = json.loads(reply.read())
        defaults = {k: v.get("default") for k, v in answer["schema"]["properties"].items()}  # overrides set these
        assert defaults["fetchNews"] == "false" and defaults["checkForUpdates"] is False, defaults
    finally:
        server.send_signal(signal.SIGTERM)  # to the command alone, as a process manager or `kill PID` does
        server.wait(timeout=60)
        # its JupyterLab and kernels went with it: no orphan holds the port
        left = [p.cmdline for p in live_processes() if p.session == server.pid]
        if left:  # (an orphan would also hold the pipes open: reading them would never end)
            os.killpg(server.pid, signal.SIGKILL)
        out, err = server.stdout.read(), server.stderr.read()  # read(), not communicate(): readline() buffered
    assert left == [], left
    assert out == "Stop the server with Ctrl+C.\n"
    assert [line for line in err.splitlines() if "received signal 15" not in line and "Shutting down" not in line
            and "kernel" not in line.lower()] == [f"Starting JupyterLab on {project} ..."]
