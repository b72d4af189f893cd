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
import subprocess
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from .errors import ShearbookError
from .project import load_project

__all__ = ["main"]



def _results(args: argparse.Namespace) -> int:
    from .pipeline import interpret

    results = interpret(load_project(args.project), args.interpretation)
    sys.stdout.write(results.to_json())
    _flags(args, results.to_dict())
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

        for path in write_tables(results, args.csv, _units(args, project)):
            _result(args, str(path))
    if args.ags4 is not None:
        from .ags4_export import write_ags4

        _result(args, str(write_ags4(project, results, interp, args.ags4, args.date)))
    _flags(args, results.to_dict())
    return 0


def _units(args: argparse.Namespace, project):
    """The display units: --units, else the project's [display] units (what is shown; stored values stay SI)."""
    from .display_units import display_for

    return display_for(args.units or project.display_units, f"{project.root / 'project.toml'}: [display] units")


def _interpretation_of(path: Path):
    """An interpretation file, or the interpretation embedded in a record (.html)."""
    from .interpretation import from_dict, load_interpretation

    if path.suffix.lower() in (".html", ".htm"):
        from .verify import read_record

        return from_dict(read_record(path)[1], f"{path} (embedded interpretation)")
    return load_interpretation(path)


def _signoff(args: argparse.Namespace) -> int:
    from .interpretation import INTERPRETATION_FILE, load_interpretation, utc_now
    from .pipeline import raw_file_hashes, read_all
    from .revisions import save_checked

    project = load_project(args.project)
    path = project.root / INTERPRETATION_FILE
    interp = load_interpretation(path)
    if args.state != "draft":  # a signature is given against these exact raw files
        interp = interp.with_raw_files(raw_file_hashes(project, read_all(project)))
    when, signature = utc_now(), None
    if args.principal and not args.sign:
        raise ShearbookError("--principal names the signer of --sign KEY; give both, or neither for an unsigned step.")
    if args.sign:
        signature = _signature(args, project, interp, when)
    try:
        interp = interp.with_signoff(args.state, args.who, args.note, time_utc=when, signature=signature)
    except ValueError as exc:
        raise ShearbookError(f"{path}: {exc}.") from exc
    saved = save_checked(interp, path)  # against the revision read above: never over another writer's work
    signed = f", signed as {args.principal}" if signature else ""
    _result(args, f"{path}: sign-off {args.state} by {args.who}{signed} (revision {saved.interpretation.revision})")
    if saved.merged:
        _say(args, f"also kept from the file, saved meanwhile by another writer: {', '.join(saved.merged)}")
        if signature and set(saved.merged) - {"signoff"}:
            _say(args, "the signature covers the interpretation as it was before that merge, so it will read "
                       "'signed content differs': look at the merged changes and sign again.")
    return 0


def _signature(args: argparse.Namespace, project, interp, when: str):
    """Sign the step about to be added: the digests of the raw files, this interpretation and its results."""
    import json

    from .pipeline import interpret
    from .signatures import StepSignature, digests_of, sign_message, signed_message

    if args.state == "draft":
        raise ShearbookError("a step back to draft is not signed; sign the checked and approved steps.")
    if not args.principal or not args.principal.strip():
        raise ShearbookError("--sign needs --principal: who you are in the reviewers' allowed-signers file "
                             "(usually your e-mail address).")
    _say(args, "Running the interpretation to sign its results ...")
    results = json.loads(interpret(project, interp).to_json())
    digests = digests_of(results["provenance"]["raw_files"], json.loads(interp.to_json()), results)
    step = {"state": args.state, "who": args.who, "time_utc": when}
    sshsig = sign_message(signed_message(step, args.principal, digests), args.sign.expanduser())
    return StepSignature(principal=args.principal, digests=digests, sshsig=sshsig)


def _diff(args: argparse.Namespace) -> int:
    from .diff import diff_interpretations

    for path in (args.before, args.after):
        if not path.is_file():
            raise ShearbookError(f"{path}: interpretation file not found.")
    before, after = _interpretation_of(args.before), _interpretation_of(args.after)
    report = diff_interpretations(load_project(args.project), before, after)
    sys.stdout.write(report.to_text(str(args.before), str(args.after)))
    return 0


def _check(args: argparse.Namespace) -> int:
    from .validate import check_project

    found = check_project(args.project, args.interpretation)
    if found.ok:
        _result(args, f"{args.project}: " + found.to_text().rstrip())
        return 0
    sys.stderr.write(found.to_text())
    return 2


def _summary(args: argparse.Namespace) -> int:
    from .interpretation import INTERPRETATION_FILE, load_interpretation
    from .pipeline import interpret
    from .summary import summary_text

    project = load_project(args.project)
    path = args.interpretation or project.root / INTERPRETATION_FILE
    interp = load_interpretation(path)
    text = summary_text(interpret(project, interp), _units(args, project), interp.signoff)
    sys.stdout.write(text)  # flags included
    return 0


def _verify(args: argparse.Namespace) -> int:
    from .verify import verify_record

    if args.record.is_dir():
        return _verify_folder(args)
    if args.scheduler or args.workers:
        raise ShearbookError("--scheduler and --workers verify a folder of records; name a folder, not one record.")
    from .verify import project_of

    v = verify_record(args.record, args.project or project_of(args.record), args.allowed_signers,
                      args.require_signed)
    if not (args.quiet and v.ok and v.signatures_ok):  # with -q only a failure is printed: what the run exists to find
        sys.stdout.write(v.to_text())
    return 0 if v.ok and v.signatures_ok else 1


def _progress_bar(args: argparse.Namespace) -> Callable[[int, int, Path], None] | None:
    """A one-line progress bar on a terminal (standard error); none with -q or when stderr is not a terminal."""
    if args.quiet or not sys.stderr.isatty():
        return None

    def bar(done: int, total: int, record: Path) -> None:
        filled = int(30 * done / total)
        end = "\n" if done == total else ""
        print(f"\r[{'#' * filled}{'.' * (30 - filled)}] {done}/{total} {record.name[:40]:40s}", end=end,
              file=sys.stderr, flush=True)

    return bar


def _verify_folder(args: argparse.Namespace) -> int:
    from .verify import Runner, verify_folder

    if args.scheduler and args.workers:
        raise ShearbookError("give either --scheduler ADDRESS (an existing dask cluster) or --workers N "
                             "(a local dask cluster of N workers), not both.")
    if args.workers is not None and args.workers < 1:
        raise ShearbookError(f"--workers {args.workers}: give a whole number of workers, 1 or more.")
    if args.jobs is not None and args.jobs < 1:
        raise ShearbookError(f"--jobs {args.jobs}: give a whole number of processes, 1 or more.")
    runner = Runner(jobs=args.jobs, scheduler=args.scheduler, workers=args.workers)
    summary = args.summary or args.record / "verify-summary.csv"
    _say(args, f"Verifying the records under {args.record} on {runner.describe()} ...")
    outcome = verify_folder(args.record, summary, args.project, progress=_progress_bar(args), runner=runner,
                            allowed_signers=args.allowed_signers, require_signed=args.require_signed)
    bad = [r for r, v, err in outcome if v is None or not (v.ok and v.signatures_ok)]
    for rec, v, err in outcome:
        if v is None or not (args.quiet and v.ok and v.signatures_ok):
            print(v.to_text().rstrip() if v else f"{rec}: ERROR - {err}")
    _result(args, f"{len(outcome) - len(bad)} of {len(outcome)} records match; summary table: {summary}")
    return 1 if bad else 0


def _record(args: argparse.Namespace) -> int:
    from .record import find_chromium, write_pdf, write_record  # nbconvert is imported only by the jobs that need it

    if args.pdf and find_chromium() is None:  # said before the workbook runs, and said again after it
        _say(args, "note: --pdf needs Chromium or Chrome, and none was found; the HTML record is written anyway.")
    _say(args, f"Running the workbook on {args.project} and exporting the record ...")
    record = write_record(args.project, args.output, args.interpretation, view=args.view, units=args.units)
    _result(args, str(record.path))
    if args.pdf:
        pdf = record.path.with_suffix(".pdf") if args.pdf is True else args.pdf
        _say(args, f"Printing it to PDF ({args.paper}) with headless Chromium ...")
        _result(args, str(write_pdf(record.path, pdf, args.paper)))
    _flags(args, record.results)
    return 0


def workbook_in_project(project_dir: Path) -> Path:
    """The project's own copy of the template workbook, made on first use (never overwritten)."""
    import nbformat

    from .record import set_parameters
    from .resources import WORKBOOK_NAME, workbook_template

    target = project_dir / WORKBOOK_NAME
    if not target.exists():
        nb = nbformat.read(workbook_template(), as_version=4)
        nb = set_parameters(nb, {"project_dir": ".", "interpretation_file": None})  # one parameters cell
        nbformat.write(nb, target)
    return target


def _port_free(ip: str, port: int) -> bool:
    import socket

    with socket.socket(socket.AF_INET6 if ":" in ip else socket.AF_INET) as sock:
        try:
            sock.bind((ip, port))
        except OSError:
            return False
    return True


def _wait_until_serving(url: str, server: subprocess.Popen[bytes], timeout_s: float = 120.0) -> bool:
    """True once ``url`` answers; False if the server exits or ``timeout_s`` passes first."""
    import time
    import urllib.error
    import urllib.request

    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline and server.poll() is None:
        try:
            with urllib.request.urlopen(url, timeout=2):
                return True
        except urllib.error.HTTPError:
            return True  # it answers (a redirect or a refusal is still an answer)
        except OSError:
            time.sleep(0.25)
    return False


def _open(args: argparse.Namespace) -> int:
    import secrets
    from urllib.parse import quote

    project = load_project(args.project)
    if not _port_free(args.ip, args.port):
        raise ShearbookError(f"port {args.port} on {args.ip} is already in use (another JupyterLab?); "
                             "choose a free one with --port.")
    notebook = workbook_in_project(project.root)
    token = os.environ.get("JUPYTER_TOKEN") or secrets.token_urlsafe(24)  # passed by environment, not argv
    url = f"http://{args.ip}:{args.port}/lab/tree/{quote(notebook.name)}"
    settings = _quiet_lab_settings()
    kernels = _warm_kernel_spec()
    cmd = [sys.executable, "-m", "jupyterlab", f"--ServerApp.root_dir={project.root}", f"--ServerApp.ip={args.ip}",
           f"--ServerApp.port={args.port}", "--ServerApp.port_retries=0",
           "--KernelManager.transport=ipc",  # kernels on Unix sockets in the runtime folder, not TCP
           # no news pop-up over the live screen and no update check: this session's own application settings
           f"--LabApp.app_settings_dir={settings}", "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
           *[f"--{app}.log_level={'INFO' if args.verbose else 'WARN'}" for app in ("ServerApp", "LabApp")],
           notebook.name]
    if args.no_browser:
        cmd.append("--no-browser")
    if hasattr(os, "geteuid") and os.geteuid() == 0:  # JupyterLab refuses root without it (containers, CI)
        cmd.append("--ServerApp.allow_root=True")
    _say(args, f"Starting JupyterLab on {project.root} ...")
    # this server's "python3" kernel imports Shearbook while it starts, so Run All reaches the live screen sooner
    data_path = os.pathsep.join(p for p in (str(kernels), os.environ.get("JUPYTER_PATH", "")) if p)
    server = subprocess.Popen(cmd, cwd=project.root, env={**os.environ, "JUPYTER_TOKEN": token,
                                                          "JUPYTER_PATH": data_path})
    # a TERM sent to this command alone (a process manager, `kill`) stops its server too: never an orphan
    # server holding the port and its kernels
    import signal
    import threading

    forward = threading.current_thread() is threading.main_thread()
    previous = signal.signal(signal.SIGTERM, lambda signum, _: server.send_signal(signum)) if forward else None
    try:
        if _wait_until_serving(f"{url}?token={token}", server):
            print(f"Workbook: {url}?token={token}\nStop the server with Ctrl+C.", flush=True)
        return server.wait()
    except KeyboardInterrupt:  # the server got the same signal and shuts down; wait for it
        return server.wait()
    finally:
        import shutil

        if forward:
            signal.signal(signal.SIGTERM, previous)
        shutil.rmtree(settings, ignore_errors=True)
        shutil.rmtree(kernels, ignore_errors=True)


def _warm_kernel_spec() -> Path:
    """A private Jupyter data folder whose "python3" kernel is this Python, importing Shearbook as it starts.

    Put first on ``JUPYTER_PATH`` for the server only: the user's own kernels and settings are untouched.
    """
    import json
    import tempfile

    from .record import WARM_UP

    folder = Path(tempfile.mkdtemp(prefix="shearbook-lab-kernels-"))
    spec = folder / "kernels" / "python3"
    spec.mkdir(parents=True)
    spec.joinpath("kernel.json").write_text(json.dumps({
        "argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}",
                 f"--IPKernelApp.exec_lines={WARM_UP}, kernels_helpers.views.widgets"],
        "display_name": "Python 3 (ipykernel)", "language": "python", "metadata": {"debugger": True}}, indent=1),
        encoding="utf-8")
    return folder


NEWS_OFF = {"@jupyterlab/apputils-extension:notification": {"fetchNews": "false", "checkForUpdates": False}}


def _quiet_lab_settings() -> Path:
    """A private copy of JupyterLab's application settings with the news and update prompts turned off.

    The installation's own overrides are kept (copied); only the notification settings are set. The
    user's settings are untouched: what the user chose in JupyterLab's settings editor still applies.
    """
    import json
    import shutil
    import tempfile

    from jupyterlab.commands import get_app_dir

    folder = Path(tempfile.mkdtemp(prefix="shearbook-lab-settings-"))
    installed = Path(get_app_dir()) / "settings"
    if installed.is_dir():
        shutil.copytree(installed, folder, dirs_exist_ok=True)
    overrides_path = folder / "overrides.json"
    try:
        overrides = json.loads(overrides_path.read_text(encoding="utf-8")) if overrides_path.is_file() else {}
    except (OSError, json.JSONDecodeError):
        overrides = {}
    for plugin, values in NEWS_OFF.items():
        overrides[plugin] = {**overrides.get(plugin, {}), **values}
    overrides_path.write_text(json.dumps(overrides, indent=2), encoding="utf-8")
    return folder


OUTPUT_POLICY = ("A normal run prints Shearbook's own lines only: progress on long work (standard error), the result "
                 "(standard output) and the flags raised on included stages (standard error); -q prints only errors.")


class _Sub:
    """Sub-command parsers that all take the common options (-q, --verbose)."""

    def __init__(self, sub: argparse._SubParsersAction[argparse.ArgumentParser],
                 common: argparse.ArgumentParser) -> None:
        self.sub, self.common = sub, common

    def add_parser(self, name: str, **kwargs: str) -> argparse.ArgumentParser:
        return self.sub.add_parser(name, parents=[self.common], **kwargs)


def _say(args: argparse.Namespace, message: str) -> None:
    """Progress and information for the person at the terminal (standard error); silent with -q."""
    if not getattr(args, "quiet", False):
        print(message, file=sys.stderr, flush=True)


def _result(args: argparse.Namespace, message: str) -> None:
    """A command's result line (standard output); silent with -q."""
    if not getattr(args, "quiet", False):
        print(message, flush=True)


def _flags(args: argparse.Namespace, results: dict[str, Any]) -> None:
    """The flags raised on included stages (results JSON), one line each (standard error); silent with -q."""
    raised = [(s["id"], f) for s in results["stages"] if s["included"] for f in s["flags"]]
    if raised:
        _say(args, f"{len(raised)} flag(s) on included stages:")
        for stage_id, flag in raised:
            _say(args, f"  flag: {stage_id}: {flag}")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="shearbook", description="Interpretation of direct shear (shear box) tests.",
                                     epilog=OUTPUT_POLICY)
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("-q", "--quiet", action="store_true",
                        help="print only errors (and the output a command exists to print: results, summary, diff)")
    common.add_argument("--verbose", action="store_true", help="also show JupyterLab's own log (open)")
    common.add_argument("--debug", action="store_true", help="on an error, also print the Python traceback")
    sub = _Sub(parser.add_subparsers(dest="command", required=True), common)
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
    p.add_argument("--pdf", nargs="?", const=True, type=Path, metavar="FILE",
                   help="also print the record to PDF with a Chromium or Chrome found on this machine "
                        "(default FILE: the record's name with .pdf)")
    p.add_argument("--paper", choices=("a4", "letter"), default="a4", help="paper size of the PDF (default a4)")
    p.add_argument("--units", choices=("SI", "US"), type=str.upper,
                   help="display units for this run: SI (kPa, mm, N) or US customary (psf, in, lbf); default: the "
                        "project's [display] units. Stored values and the results JSON stay SI")
    p.set_defaults(func=_record)
    p = sub.add_parser("verify", help="re-run a record (or every record under a folder) and compare every number")
    p.add_argument("record", type=Path, help="a record .html file, or a folder of records (batch, in parallel)")
    p.add_argument("--project", type=Path,
                   help="project folder (default: the folder above the record holding project.toml)")
    p.add_argument("--jobs", type=int, help="local processes for a folder (default: all cores)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="verify a folder on an existing dask.distributed cluster, e.g. tcp://10.0.0.5:8786 "
                        "(workers need Shearbook installed and the records and projects at the same paths)")
    p.add_argument("--workers", type=int, metavar="N",
                   help="verify a folder on a local dask.distributed cluster of N worker processes")
    p.add_argument("--summary", type=Path, help="CSV summary table for a folder (default: FOLDER/verify-summary.csv)")
    p.add_argument("--allowed-signers", type=Path, metavar="FILE",
                   help="check sign-off signatures against this file (OpenSSH allowed_signers format)")
    p.add_argument("--require-signed", action="store_true",
                   help="fail when a checked or approved step is unsigned")
    p.set_defaults(func=_verify)
    p = sub.add_parser("signoff",
                       help="record a sign-off step (draft -> checked -> approved) in the interpretation file")
    p.add_argument("project", type=Path)
    p.add_argument("--state", choices=("draft", "checked", "approved"), required=True)
    p.add_argument("--who", required=True, help="name of the person signing")
    p.add_argument("--note", default="", help="remark kept with the step")
    p.add_argument("--sign", type=Path, metavar="KEY",
                   help="sign the step with your OpenSSH key (ssh-keygen -Y sign; Ed25519), e.g. ~/.ssh/id_ed25519, "
                        "or the .pub of a key held by ssh-agent")
    p.add_argument("--principal", help="with --sign: who you are in the allowed-signers file (usually your e-mail)")
    p.set_defaults(func=_signoff)
    p = sub.add_parser("check", help="check a project: every problem of the project file, the interpretation file "
                                     "and the readings files at once (nothing is computed or written)")
    p.add_argument("project", type=Path)
    p.add_argument("-i", "--interpretation", type=Path)
    p.set_defaults(func=_check)
    p = sub.add_parser("summary", help="print picks (beside the suggestions), exclusions, flags and envelopes as text")
    p.add_argument("project", type=Path)
    p.add_argument("-i", "--interpretation", type=Path)
    p.add_argument("--units", choices=("SI", "US"), type=str.upper,
                   help="display units for this run: SI (kPa, mm, N) or US customary (psf, in, lbf); default: the "
                        "project's [display] units. Stored values and the results JSON stay SI")
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
    p.add_argument("--units", choices=("SI", "US"), type=str.upper,
                   help="display units for this run: SI (kPa, mm, N) or US customary (psf, in, lbf); default: the "
                        "project's [display] units. Stored values and the results JSON stay SI")
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
    _result(args, f"Project created: {project}\nCheck the column map in {project / 'project.toml'} "
                  "before interpreting.")
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; every failure is one message on standard error and exit status 2, never a traceback.

    A numerical warning (numpy, scipy) is an error here, not a line on the terminal: a computation
    that warns has met data it was not written for, and its result is not given. ``--debug`` adds
    the traceback.

    This process does without the rfc3987_syntax package: jsonschema (imported by nbformat) builds its
    38 grammars at import when it is installed, over a second, a sixth of a record here, for the "iri"
    string format that no notebook schema uses. An import of it here then fails as if it were not installed.
    """
    import sys
    import warnings

    sys.modules.setdefault("rfc3987_syntax", None)  # type: ignore[arg-type]  (None: "not importable", by design)
    args = build_parser().parse_args(argv)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", RuntimeWarning)
            return int(args.func(args))
    except ShearbookError as exc:
        _fail(args, f"shearbook: error: {exc}")
    except KeyboardInterrupt:
        _fail(args, "shearbook: stopped (Ctrl+C); nothing half-written was left (files are written atomically).")
        return 130
    except RuntimeWarning as exc:
        _fail(args, f"shearbook: error: {args.command}: a computation met values it cannot handle ({exc}); no "
                    "result was given. Run `shearbook check` on the project; if it finds nothing, report this "
                    "with the output of --debug.")
    except (OSError, MemoryError, RecursionError) as exc:
        _fail(args, f"shearbook: error: {args.command}: {type(exc).__name__}: {exc}. Check the path, the disk and "
                    "the file permissions; nothing half-written was left.")
    except Exception as exc:  # the boundary: whatever escaped is a fault of Shearbook, said as one sentence
        _fail(args, f"shearbook: error: {args.command} failed inside Shearbook ({type(exc).__name__}: {exc}). "
                    "Run `shearbook check` on the project; if it finds nothing, this is a fault in Shearbook: "
                    "report it with the output of --debug.")
    return 2


def _fail(args: argparse.Namespace, message: str) -> None:
    if getattr(args, "debug", False):
        import traceback

        traceback.print_exc()
    print(message, file=sys.stderr)


if __name__ == "__main__":
    raise SystemExit(main())
