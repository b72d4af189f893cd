"""The ``shearbook`` command line: the headless jobs around the workbook.

    shearbook open PROJECT            open the workbook on PROJECT in JupyterLab (prints the URL)
    shearbook record PROJECT [-o F]   write the HTML record headless and print its path
    shearbook results PROJECT         print the results as JSON
    shearbook diff PROJECT OLD NEW    what changed between two interpretation files, in words
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
from collections.abc import Sequence
from pathlib import Path

import nbformat

from .errors import ShearbookError
from .pipeline import interpret
from .project import load_project

__all__ = ["main"]

WORKBOOK_NAME = "shear_interpretation.ipynb"


def _results(args: argparse.Namespace) -> int:
    results = interpret(load_project(args.project), args.interpretation)
    sys.stdout.write(results.to_json())
    return 0


def _diff(args: argparse.Namespace) -> int:
    from .diff import diff_interpretations
    from .interpretation import load_interpretation

    for path in (args.before, args.after):
        if not path.is_file():
            raise ShearbookError(f"{path}: interpretation file not found.")
    before, after = load_interpretation(args.before), load_interpretation(args.after)
    report = diff_interpretations(load_project(args.project), before, after)
    sys.stdout.write(report.to_text(str(args.before), str(args.after)))
    return 0


def _record(args: argparse.Namespace) -> int:
    from .record import write_record  # nbconvert is imported only by the jobs that need it

    record = write_record(args.project, args.output, args.interpretation, view=args.view)
    print(record.path)
    return 0


def workbook_in_project(project_dir: Path) -> Path:
    """The project's own copy of the template workbook, made on first use (never overwritten)."""
    from .record import TEMPLATE, inject_parameters

    target = project_dir / WORKBOOK_NAME
    if not target.exists():
        nb = nbformat.read(TEMPLATE, as_version=4)
        nb = inject_parameters(nb, {"project_dir": ".", "interpretation_file": None})
        nbformat.write(nb, target)
    return target


def _open(args: argparse.Namespace) -> int:
    project = load_project(args.project)
    notebook = workbook_in_project(project.root)
    jupyter = shutil.which("jupyter-lab", path=str(Path(sys.executable).parent)) or shutil.which("jupyter-lab")
    if jupyter is None:
        raise ShearbookError("jupyter-lab is not installed in this environment; run the README's set-up command.")
    url = f"http://{args.ip}:{args.port}/lab/tree/{notebook.name}"
    print(f"Opening the workbook {notebook} in JupyterLab.\nURL: {url}  (JupyterLab prints the URL with its token below)",
          flush=True)
    cmd = [jupyter, f"--ServerApp.root_dir={project.root}", f"--ServerApp.ip={args.ip}", f"--ServerApp.port={args.port}",
           notebook.name]
    if args.no_browser:
        cmd.append("--no-browser")
    return subprocess.call(cmd, cwd=project.root)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="shearbook", description="Interpretation of direct shear (shear box) tests.")
    sub = parser.add_subparsers(dest="command", required=True)
    p = sub.add_parser("open", help="open the workbook on a project in JupyterLab")
    p.add_argument("project", type=Path, help="project folder (holds project.toml)")
    p.add_argument("--port", type=int, default=8888)
    p.add_argument("--ip", default="127.0.0.1")
    p.add_argument("--no-browser", action="store_true", help="do not start a web browser")
    p.set_defaults(func=_open)
    p = sub.add_parser("record", help="write the self-contained HTML record of a project (headless)")
    p.add_argument("project", type=Path)
    p.add_argument("-o", "--output", type=Path, help="record file (default: PROJECT/records/shearbook-VIEW-UTC.html)")
    p.add_argument("-i", "--interpretation", type=Path, help="interpretation file (default: PROJECT/interpretation.json)")
    p.add_argument("--view", choices=("report", "audit"), default="report", help="report hides the code; audit shows it")
    p.set_defaults(func=_record)
    p = sub.add_parser("diff", help="what changed between two interpretation files of a project, in words")
    p.add_argument("project", type=Path)
    p.add_argument("before", type=Path, help="the earlier interpretation file")
    p.add_argument("after", type=Path, help="the later interpretation file")
    p.set_defaults(func=_diff)
    p = sub.add_parser("results", help="print the results of a project as JSON")
    p.add_argument("project", type=Path)
    p.add_argument("-i", "--interpretation", type=Path)
    p.set_defaults(func=_results)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return int(args.func(args))
    except ShearbookError as exc:
        print(f"shearbook: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    raise SystemExit(main())
