"""The pure core imports no display or notebook machinery (STYLE habit 1)."""

from __future__ import annotations

import ast
import json
import subprocess
import sys
from pathlib import Path

import pytest

import kernels_helpers

# the command line, the headless export and its kernel's client, and verify (it re-renders the record's sections);
# views/ is a package of its own
NOT_PURE = ("__init__", "cli", "record", "kernel_client", "verify")
# every other module of the package is pure: taken from the files, so a new module is checked from its first day
PURE_MODULES = sorted(p.stem for p in (Path(kernels_helpers.__file__).parent).glob("*.py") if p.stem not in NOT_PURE)
FORBIDDEN = ("bokeh", "ipywidgets", "nbconvert", "nbclient", "jupyter_bokeh")
PACKAGE_DIR = Path(kernels_helpers.__file__).parent

PROBE = """
import importlib, json, sys
importlib.import_module({module!r})
forbidden = {forbidden!r}
print(json.dumps(sorted(m for m in sys.modules if m.split(".")[0] in forbidden)))
"""


MODULES = ["kernels_helpers", *(f"kernels_helpers.{m}" for m in PURE_MODULES)]
# what `shearbook record` imports before its kernel starts, and the files it checks meanwhile
LIGHT_MODULES = ["kernels_helpers.cli", "kernels_helpers.record", "kernels_helpers.project",
                 "kernels_helpers.interpretation", "kernels_helpers.settings"]
HEAVY = ("numpy", "pandas", "scipy", "nbformat", "nbclient", "nbconvert", "bokeh")


Probes = dict[str, tuple[int, str, str]]  # key -> (return code, stdout, stderr)


def _probe_all(jobs: dict[str, tuple[str, tuple[str, ...]]]) -> Probes:
    """Run one fresh interpreter per probe, all at once."""
    procs = {
        key: subprocess.Popen(
            [sys.executable, "-c", PROBE.format(module=module, forbidden=forbidden)],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for key, (module, forbidden) in jobs.items()
    }
    out = {}
    for key, proc in procs.items():
        stdout, stderr = proc.communicate(timeout=180)
        out[key] = (proc.returncode, stdout, stderr)
    return out


# The numerical stack the pure core may use: imported once by the forking probe below, which checks that it
# loads none of FORBIDDEN itself, so each module's probe pays only for the module.
PRELOAD = ("numpy", "pandas", "scipy.stats", "scipy.signal", "scipy.ndimage", "scipy.interpolate",
           "scipy.optimize", "pydantic", "tomllib")
FORK_PROBE = """
import importlib, json, os, sys
forbidden, modules = {forbidden!r}, {modules!r}
for name in {preload!r}:
    importlib.import_module(name)
def loaded():
    return sorted(m for m in sys.modules if m.split(".")[0] in forbidden)
out = {{"(preload)": [0, loaded(), ""]}}
for module in modules:
    read, write = os.pipe()
    pid = os.fork()
    if pid == 0:  # the child: a copy of this interpreter with only the preload imported
        os.close(read)
        try:
            importlib.import_module(module)
            answer = [0, loaded(), ""]
        except BaseException as exc:
            answer = [1, [], f"{{type(exc).__name__}}: {{exc}}"]
        os.write(write, json.dumps(answer).encode())
        os._exit(0)
    os.close(write)
    with os.fdopen(read) as f:
        text = f.read()
    os.waitpid(pid, 0)
    out[module] = json.loads(text) if text else [1, [], "the probe died"]
print(json.dumps(out))
"""


FORK_CONTROL = "kernels_helpers.views.live_plots"  # imports bokeh: the forking probe must see it


def _probe_forked(modules: list[str], forbidden: tuple[str, ...]) -> Probes:
    """Import each module in a fork of one interpreter that holds only the numerical stack (POSIX fork)."""
    code = FORK_PROBE.format(forbidden=forbidden, modules=modules, preload=PRELOAD)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300, check=False)
    assert done.returncode == 0, done.stderr
    answers = json.loads(done.stdout.strip().splitlines()[-1])
    return {m: (rc, json.dumps(found), err) for m, (rc, found, err) in answers.items()}


@pytest.fixture(scope="session")
def probes(tmp_path_factory: pytest.TempPathFactory) -> Probes:
    """Every probe's answer, probed once for the run (the tests of this module may go to different workers)."""
    from conftest import made_once

    def probe(folder: Path) -> Path:
        jobs: dict[str, tuple[str, tuple[str, ...]]] = {}
        # a control: the probe must be able to fail (json is imported by the probe itself)
        jobs["control"] = ("kernels_helpers.units", ("json",))
        for m in LIGHT_MODULES:  # these must not even load the numerical stack: fresh interpreters
            jobs[f"light:{m}"] = (m, HEAVY)
        folder.mkdir(parents=True)
        answers = folder / "probes.json"
        # the forking probe's control leads: a module that loads bokeh, then every pure module from the same preload
        forked = _probe_forked([FORK_CONTROL, *MODULES], FORBIDDEN)
        answers.write_text(json.dumps({**_probe_all(jobs), **forked}), encoding="utf-8")
        return answers

    found = json.loads(made_once(tmp_path_factory, "import_probes", probe).read_text(encoding="utf-8"))
    return {key: (rc, out, err) for key, (rc, out, err) in found.items()}


@pytest.mark.slow  # it makes the probes (seconds), early, on a worker of its own (conftest.MADE_ONCE)
def test_the_preloaded_numerical_stack_loads_no_display_package(probes: Probes) -> None:
    returncode, stdout, stderr = probes["(preload)"]
    assert returncode == 0, stderr
    assert json.loads(stdout) == []


def test_the_forking_probe_sees_a_forbidden_import(probes: Probes) -> None:
    assert "bokeh" in json.loads(probes[FORK_CONTROL][1])
    # probed after the control in the same interpreter: a fork starts from the preload, not from the last import
    assert json.loads(probes["kernels_helpers.units"][1]) == []


@pytest.mark.parametrize("module", MODULES)
def test_import_in_fresh_interpreter_loads_no_display_packages(probes: Probes, module: str) -> None:
    returncode, stdout, stderr = probes[module]
    assert returncode == 0, stderr
    assert json.loads(stdout.strip().splitlines()[-1]) == []


@pytest.mark.parametrize("module", LIGHT_MODULES)
def test_commands_start_without_the_numerical_stack(probes: Probes, module: str) -> None:
    # shearbook record starts its kernel before it imports nbformat, nbclient and nbconvert, and
    # checks the project and interpretation files without pandas or scipy (record.py docstring)
    returncode, stdout, stderr = probes[f"light:{module}"]
    assert returncode == 0, stderr
    assert json.loads(stdout.strip().splitlines()[-1]) == []


def test_probe_detects_a_forbidden_import(probes: Probes) -> None:
    returncode, stdout, stderr = probes["control"]
    assert returncode == 0, stderr
    assert "json" in json.loads(stdout.strip().splitlines()[-1])


def _imported_roots(path: Path) -> set[str]:
    """Top-level package names imported anywhere in a module (including inside functions)."""
    roots: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), filename=str(path))):
        if isinstance(node, ast.Import):
            roots.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            roots.add(node.module.split(".")[0])
        elif isinstance(node, ast.Call) and getattr(node.func, "attr", getattr(node.func, "id", "")) in (
            "import_module",
            "__import__",
        ):
            names = [a.value for a in node.args if isinstance(a, ast.Constant) and isinstance(a.value, str)]
            roots.update(name.split(".")[0] for name in names)
    return roots


@pytest.mark.parametrize("module", ["__init__", *PURE_MODULES])
def test_pure_module_source_has_no_forbidden_import(module: str) -> None:
    path = PACKAGE_DIR / f"{module}.py"
    assert path.is_file(), f"{path} is missing"
    assert _imported_roots(path).isdisjoint(FORBIDDEN)


def _relative_imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.level > 0:
            if node.module:
                names.add(node.module.split(".")[0])
            else:
                names.update(alias.name for alias in node.names)
    return names


@pytest.mark.parametrize("module", ["__init__", *PURE_MODULES])
def test_pure_modules_import_only_pure_modules(module: str) -> None:
    # views, record and cli may use bokeh or nbconvert; the pure core must never reach them
    assert _relative_imports(PACKAGE_DIR / f"{module}.py") <= set(PURE_MODULES)


def test_ast_check_sees_imports(tmp_path: Path) -> None:
    sample = tmp_path / "sample.py"
    sample.write_text(
        "import bokeh.plotting\nfrom ipywidgets import Button\n"
        "def f():\n    import nbconvert\n    importlib.import_module('nbclient.client')\n",
        encoding="utf-8",
    )
    assert _imported_roots(sample) >= {"bokeh", "ipywidgets", "nbconvert", "nbclient"}


def _import_graph(package_dir: Path, modules: list[str]) -> dict[str, set[str]]:
    """Module -> the package's modules it imports: every relative or absolute import, at the top, inside
    functions or under ``TYPE_CHECKING`` (a cycle hidden inside a function is still a cycle)."""
    graph: dict[str, set[str]] = {}
    for module in modules:
        tree = ast.parse((package_dir / f"{module}.py").read_text(encoding="utf-8"))
        names = _relative_imports(package_dir / f"{module}.py")
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and node.level == 0 and (node.module or "").startswith(
                    f"{package_dir.name}."):
                names.add(node.module.split(".")[1])  # type: ignore[union-attr]
        graph[module] = {n for n in names if n in modules and n != module}
    return graph


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Each import cycle once, as the modules along it (depth-first search over the graph)."""
    found: list[list[str]] = []
    state: dict[str, int] = {}  # 1: on the current path, 2: finished
    path: list[str] = []

    def visit(m: str) -> None:
        state[m] = 1
        path.append(m)
        for n in sorted(graph[m]):
            if state.get(n) == 1:
                found.append([*path[path.index(n):], n])
            elif n not in state:
                visit(n)
        path.pop()
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m)
    return found


def test_the_pure_core_s_import_graph_has_no_cycle() -> None:
    """Data flows one way: a module never imports, even lazily, a module that imports it back."""
    cycles = _cycles(_import_graph(PACKAGE_DIR, ["__init__", *PURE_MODULES]))
    assert not cycles, "import cycles in the pure core: " + "; ".join(" -> ".join(c) for c in cycles)


def test_the_cycle_check_finds_a_cycle_hidden_in_a_function(tmp_path: Path) -> None:
    pkg = tmp_path / "kernels_helpers"
    pkg.mkdir()
    (pkg / "a.py").write_text("from .b import x\n", encoding="utf-8")
    (pkg / "b.py").write_text("def f():\n    from .c import y\n", encoding="utf-8")
    (pkg / "c.py").write_text("from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n"
                              "    from kernels_helpers.a import z\n", encoding="utf-8")
    (pkg / "d.py").write_text("from . import a\n", encoding="utf-8")
    graph = _import_graph(pkg, ["a", "b", "c", "d"])
    assert graph == {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}
    assert _cycles(graph) == [["a", "b", "c", "a"]]


STEPPED = ("pipeline", "reduce")  # a stage's path: each step short enough to read at once


def _long_functions(path: Path, limit: int) -> list[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    return [f"{node.name} ({node.end_lineno - node.lineno + 1} lines)" for node in ast.walk(tree)
            if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef)
            and node.end_lineno is not None and node.end_lineno - node.lineno + 1 >= limit]


@pytest.mark.parametrize("module", STEPPED)
def test_a_stage_s_path_is_made_of_steps_under_50_lines(module: str) -> None:
    assert _long_functions(PACKAGE_DIR / f"{module}.py", 50) == []


def test_the_length_check_counts_a_long_function(tmp_path: Path) -> None:
    sample = tmp_path / "sample.py"
    sample.write_text("def short():\n    return 1\n\n\ndef long():\n" + "    x = 1\n" * 60, encoding="utf-8")
    assert _long_functions(sample, 50) == ["long (61 lines)"]


ROOT = PACKAGE_DIR.parent
# the design card's top level, and the dot-files of the tools (CI entry, git's ignore list)
TOP_LEVEL = {"README.md", "DEVELOPERS.md", "pyproject.toml", "workbook", "kernels_helpers", "tests",
             "example_project", "LICENSE", ".ci", ".gitignore"}


@pytest.mark.skipif(not (ROOT / ".git").exists(), reason="the installed package has no checkout to list")
def test_the_checkout_holds_the_design_card_s_top_level_and_nothing_else() -> None:
    """A stray file committed at the top (a downloaded wheel, a plot saved by a script read from stdin) fails."""
    tracked = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=True).stdout
    top = {line.split("/", 1)[0] for line in tracked.splitlines() if line}
    assert top - TOP_LEVEL == set(), f"files at the top of the checkout outside the design card: {top - TOP_LEVEL}"
    assert TOP_LEVEL - top == set(), f"the design card's top level is missing: {TOP_LEVEL - top}"
