"""The ``shearbook`` command line: the headless jobs around the workbook.

    shearbook open PROJECT            open the workbook on PROJECT in JupyterLab (prints the URL)
    shearbook record PROJECT [-o F]   write the HTML record headless and print its path
    shearbook results PROJECT         print the results as JSON
    shearbook export PROJECT --csv FOLDER --ags4 FILE   results as CSV tables and/or an AGS4 file
    shearbook summary PROJECT         picks beside suggestions, exclusions, flags, envelopes as text
    shearbook diff PROJECT OLD NEW    what changed between two interpretation files, in words
    shearbook verify RECORD|FOLDER    re-run records from the raw files; exit 1 on any mismatch
    shearbook signoff PROJECT ...     record draft -> checked -> approved, who and when
    shearbook import FOLDER --specimens TABLE.csv -o PROJECT   create a project from laboratory files
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
from collections.abc import Sequence
from pathlib import Path

from .errors import ShearbookError
from .project import load_project

__all__ = ["main"]

WORKBOOK_NAME = "shear_interpretation.ipynb"


def _results(args: argparse.Namespace) -> int:
    from .pipeline import interpret

    results = interpret(load_project(args.project), args.interpretation)
    sys.stdout.write(results.to_json())
    return 0


def _export(args: argparse.Namespace) -> int:
    from .interpretation import INTERPRETATION_FILE, load_interpretation
    from .pipeline import interpret

    if args.csv is None and args.ags4 is None:
        raise ShearbookError("export: say what to write: --csv FOLDER (CSV tables), --ags4 FILE (AGS4 file), or both.")
    project = load_project(args.project)
    interp = load_interpretation(args.interpretation or project.root / INTERPRETATION_FILE)
    results = interpret(project, interp)
    if args.csv is not None:
        from .export_tables import write_tables

        for path in write_tables(results, args.csv):
            print(path)
    if args.ags4 is not None:
        from .ags4_export import write_ags4

        print(write_ags4(project, results, interp, args.ags4, args.date))
    return 0


def _interpretation_of(path: Path):
    """An interpretation file, or the interpretation embedded in a record (.html)."""
    from .interpretation import from_dict, load_interpretation

    if path.suffix.lower() in (".html", ".htm"):
        from .verify import read_record

        return from_dict(read_record(path)[1], f"{path} (embedded interpretation)")
    return load_interpretation(path)


def _signoff(args: argparse.Namespace) -> int:
    from .interpretation import INTERPRETATION_FILE, load_interpretation, save_interpretation
    from .pipeline import raw_file_hashes, read_all

    project = load_project(args.project)
    path = project.root / INTERPRETATION_FILE
    interp = load_interpretation(path)
    try:
        interp = interp.with_signoff(args.state, args.who, args.note)
    except ValueError as exc:
        raise ShearbookError(f"{path}: {exc}.") from exc
    if args.state != "draft":  # a signature is given against these exact raw files
        interp = interp.with_raw_files(raw_file_hashes(project, read_all(project)))
    save_interpretation(interp, path)
    print(f"{path}: sign-off {args.state} by {args.who}")
    return 0


def _diff(args: argparse.Namespace) -> int:
    from .diff import diff_interpretations

    for path in (args.before, args.after):
        if not path.is_file():
            raise ShearbookError(f"{path}: interpretation file not found.")
    before, after = _interpretation_of(args.before), _interpretation_of(args.after)
    report = diff_interpretations(load_project(args.project), before, after)
    sys.stdout.write(report.to_text(str(args.before), str(args.after)))
    return 0


def _summary(args: argparse.Namespace) -> int:
    from .pipeline import interpret
    from .summary import summary_text

    sys.stdout.write(summary_text(interpret(load_project(args.project), args.interpretation)))
    return 0


def _verify(args: argparse.Namespace) -> int:
    from .verify import verify_folder, verify_record

    if args.record.is_dir():
        def bar(done: int, total: int, record: Path) -> None:
            filled = int(30 * done / total)
            print(f"\r[{'#' * filled}{'.' * (30 - filled)}] {done}/{total} {record.name[:40]:40s}", end="",
                  file=sys.stderr, flush=True)

        summary = args.summary or args.record / "verify-summary.csv"
        outcome = verify_folder(args.record, summary, args.project, args.jobs, bar)
        print(file=sys.stderr)
        bad = [r for r, v, err in outcome if v is None or not v.ok]
        for rec, v, err in outcome:
            print(v.to_text().rstrip() if v else f"{rec}: ERROR - {err}")
        print(f"{len(outcome) - len(bad)} of {len(outcome)} records match; summary table: {summary}")
        return 1 if bad else 0
    from .verify import project_of

    v = verify_record(args.record, args.project or project_of(args.record))
    sys.stdout.write(v.to_text())
    return 0 if v.ok else 1


def _record(args: argparse.Namespace) -> int:
    from .record import write_record  # nbconvert is imported only by the jobs that need it

    record = write_record(args.project, args.output, args.interpretation, view=args.view)
    print(record.path)
    return 0


def workbook_in_project(project_dir: Path) -> Path:
    """The project's own copy of the template workbook, made on first use (never overwritten)."""
    import nbformat

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
    print(f"Opening the workbook {notebook} in JupyterLab.\nURL: {url}  "
          "(JupyterLab prints the URL with its token below)", flush=True)
    cmd = [jupyter, f"--ServerApp.root_dir={project.root}", f"--ServerApp.ip={args.ip}",
           f"--ServerApp.port={args.port}", notebook.name]
    if args.no_browser:
        cmd.append("--no-browser")
    if hasattr(os, "geteuid") and os.geteuid() == 0:  # JupyterLab refuses root without it (containers, CI)
        cmd.append("--ServerApp.allow_root=True")
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
    p.add_argument("-i", "--interpretation", type=Path,
                   help="interpretation file (default: PROJECT/interpretation.json)")
    p.add_argument("--view", choices=("report", "audit"), default="report",
                   help="report hides the code; audit shows it")
    p.set_defaults(func=_record)
    p = sub.add_parser("verify", help="re-run a record (or every record under a folder) and compare every number")
    p.add_argument("record", type=Path, help="a record .html file, or a folder of records (batch, in parallel)")
    p.add_argument("--project", type=Path,
                   help="project folder (default: the folder above the record holding project.toml)")
    p.add_argument("--jobs", type=int, help="parallel workers for a folder (default: all cores)")
    p.add_argument("--summary", type=Path, help="CSV summary table for a folder (default: FOLDER/verify-summary.csv)")
    p.set_defaults(func=_verify)
    p = sub.add_parser("signoff",
                       help="record a sign-off step (draft -> checked -> approved) in the interpretation file")
    p.add_argument("project", type=Path)
    p.add_argument("--state", choices=("draft", "checked", "approved"), required=True)
    p.add_argument("--who", required=True, help="name of the person signing")
    p.add_argument("--note", default="", help="remark kept with the step")
    p.set_defaults(func=_signoff)
    p = sub.add_parser("summary", help="print picks (beside the suggestions), exclusions, flags and envelopes as text")
    p.add_argument("project", type=Path)
    p.add_argument("-i", "--interpretation", type=Path)
    p.set_defaults(func=_summary)
    p = sub.add_parser("diff", help="what changed between two interpretation files of a project, in words")
    p.add_argument("project", type=Path)
    p.add_argument("before", type=Path, help="the earlier interpretation file, or a record (.html)")
    p.add_argument("after", type=Path, help="the later interpretation file, or a record (.html)")
    p.set_defaults(func=_diff)
    p = sub.add_parser("results", help="print the results of a project as JSON")
    p.add_argument("project", type=Path)
    p.add_argument("-i", "--interpretation", type=Path)
    p.set_defaults(func=_results)
    p = sub.add_parser("export", help="write the results as CSV tables (stages, envelopes, sensitivity) and/or AGS4")
    p.add_argument("project", type=Path)
    p.add_argument("-i", "--interpretation", type=Path)
    p.add_argument("--csv", type=Path, metavar="FOLDER", help="folder for stages.csv, envelopes.csv, sensitivity.csv")
    p.add_argument("--ags4", type=Path, metavar="FILE", help="AGS4 file of the shear box groups SHBG and SHBT")
    p.add_argument("--date", help="TRAN_DATE of the AGS4 file, yyyy-mm-dd (default: today, UTC)")
    p.set_defaults(func=_export)
    p = sub.add_parser("import", help="create a project from a folder of laboratory files and a specimen table")
    p.add_argument("folder", type=Path, help="folder of readings files (CSV, TSV, semicolon, XLSX); only read")
    p.add_argument("--specimens", type=Path, required=True, help="specimen table (CSV, one row per stage)")
    p.add_argument("-o", "--output", type=Path, required=True, help="new project folder (must not exist or be empty)")
    p.add_argument("--dilation", choices=("positive", "negative"),
                   help="how every vertical gauge reads on dilation, unless the specimen table says per row")
    p.add_argument("--column", action="append", default=[], metavar="QUANTITY=HEADER",
                   help="say which header holds a quantity, e.g. --column shear_force='Load (kN)' (repeatable)")
    p.add_argument("--unit", action="append", default=[], metavar="QUANTITY=UNIT",
                   help="say the unit of a quantity whose header has none, e.g. --unit time=min (repeatable)")
    p.add_argument("--name", default="", help="project name (default: the folder's name)")
    p.set_defaults(func=_import)
    return parser


def _pairs(items: Sequence[str], option: str) -> dict[str, str]:
    out = {}
    for item in items:
        key, sep, value = item.partition("=")
        if not sep or not key.strip() or not value.strip():
            raise ShearbookError(f"{option} {item!r}: write it as QUANTITY=VALUE, e.g. {option} time=min.")
        out[key.strip()] = value.strip()
    return out


def _import(args: argparse.Namespace) -> int:
    from .importer import ImportOptions, import_folder

    options = ImportOptions(dilation=args.dilation, columns=_pairs(args.column, "--column"),
                            units=_pairs(args.unit, "--unit"), name=args.name)
    project = import_folder(args.folder, args.specimens, args.output, options)
    print(f"Project created: {project}\nCheck the column map in {project / 'project.toml'} before interpreting.")
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return int(args.func(args))
    except ShearbookError as exc:
        print(f"shearbook: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    raise SystemExit(main())
