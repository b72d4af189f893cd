"""Headless execution of a workbook and its export to a self-contained HTML record.

Steps, each a small function: start the kernel -> load the template -> inject parameters ->
execute (nbclient) -> stop on the first failed cell -> export (nbconvert, offline template) ->
check that nothing in the file is fetched from the network -> embed the results JSON -> write
atomically. A record is never produced from a notebook that raised.

The kernel is started first, before this process imports nbformat, nbclient and nbconvert, and is
told to import the package while it starts (``IPKernelApp.exec_lines``): the two processes do
their imports at the same time, on two cores, instead of one after the other. The startup code
only imports; everything the record shows is computed by the workbook's own cells.
"""

from __future__ import annotations

import hashlib
import json
import re
import shutil
import tempfile
from dataclasses import dataclass
from datetime import UTC, datetime
from html.parser import HTMLParser
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

from .atomic import write_text_atomic
from .errors import RecordError
from .escaping import json_for_script, script_safe, unsafe_in_script
from .interpretation import INTERPRETATION_FILE, load_interpretation
from .mime import INTERPRETATION_MIME, RESULTS_MIME, canonical_text
from .project import load_project
from .resources import record_templates_dir, workbook_template

if TYPE_CHECKING:  # imported where used: the kernel starts before these are imported
    import nbformat
    from jupyter_client.manager import AsyncKernelManager

__all__ = ["execute_workbook", "find_chromium", "network_references", "write_pdf", "write_record"]

View = Literal["report", "audit"]
RECORD_SCHEMA = "shearbook.record/2"  # 2: the visible sections are marked (views.sections) and verified
LIVE_TAG = "interactive"  # cells of the live screen: left out of the record (and of its execution)
KERNEL = "python3"
KERNEL_DIR_PREFIX = "shearbook-kernel-"  # a private folder per kernel for its IPC sockets, removed when it stops
WARM_UP = "import kernels_helpers.pipeline, kernels_helpers.views"  # what the workbook's first cell imports


def inject_parameters(nb: nbformat.NotebookNode, params: dict[str, object]) -> nbformat.NotebookNode:
    """Insert a cell assigning ``params`` right after the cell tagged ``parameters``."""
    import nbformat

    lines = ["# Parameters injected by Shearbook"] + [f"{k} = {v!r}" for k, v in params.items()]
    cell = nbformat.v4.new_code_cell("\n".join(lines), metadata={"tags": ["injected-parameters"]})
    cell["id"] = "sb-injected"
    index = next((i for i, c in enumerate(nb.cells) if "parameters" in c.get("metadata", {}).get("tags", [])), -1)
    nb.cells.insert(index + 1, cell)
    return nb


def set_parameters(nb: nbformat.NotebookNode, params: dict[str, object]) -> nbformat.NotebookNode:
    """Give the parameters new values in the cell tagged ``parameters`` itself (the notebook keeps one such cell)."""
    cell = next((c for c in nb.cells if "parameters" in c.get("metadata", {}).get("tags", [])), None)
    if cell is None:
        raise RecordError("the workbook template has no cell tagged 'parameters'; use the template Shearbook ships.")
    source = cell.source
    for key, value in params.items():
        line = re.compile(rf"^{re.escape(key)}\s*=.*$", re.M)
        if not line.search(source):
            raise RecordError(f"the workbook's parameters cell does not set {key!r}; use the template Shearbook ships.")
        source = line.sub(lambda _m, k=key, v=value: f"{k} = {v!r}", source, count=1)
    cell.source = source
    return nb


def start_kernel(cwd: Path) -> AsyncKernelManager:
    """Launch a kernel in ``cwd`` that imports the package while it starts; returns at once."""
    from jupyter_client.kernelspec import KernelSpecManager
    from jupyter_client.manager import AsyncKernelManager
    from jupyter_core.utils import run_sync

    # IPC transport (Unix sockets in a private folder, mode 0700) instead of TCP on localhost: no other user
    # of the machine can reach the kernel, and ipykernel has no cause to warn about unencrypted TCP.
    sockets = Path(tempfile.mkdtemp(prefix=KERNEL_DIR_PREFIX))
    # kernel_dirs=[]: the kernel is this environment's own interpreter (the native "python3"), never a python3
    # kernel spec installed for the user that may point at another environment and another Shearbook.
    # client_class: channels that wait in short slices, so a missed socket wake-up never holds a cell (kernel_client)
    km = AsyncKernelManager(kernel_name=KERNEL, transport="ipc", connection_file=str(sockets / "kernel.json"),
                            kernel_spec_manager=KernelSpecManager(kernel_dirs=[]),
                            client_class="kernels_helpers.kernel_client.SteadyKernelClient")
    try:
        run_sync(km.start_kernel)(cwd=str(cwd), extra_arguments=[f"--IPKernelApp.exec_lines={WARM_UP}"])
    except BaseException:
        shutil.rmtree(sockets, ignore_errors=True)
        raise
    return km


def stop_kernel(km: AsyncKernelManager) -> None:
    from jupyter_core.utils import run_sync

    if km.has_kernel:
        run_sync(km.shutdown_kernel)(now=True)
    sockets = Path(km.connection_file).parent
    if sockets.name.startswith(KERNEL_DIR_PREFIX):
        shutil.rmtree(sockets, ignore_errors=True)


def execute_workbook(project_dir: Path, interpretation_file: Path | None = None, template: Path | None = None,
                     timeout_s: int = 600, live: bool = False,
                     km: AsyncKernelManager | None = None, units: str | None = None) -> nbformat.NotebookNode:
    """Execute the template on a project; raise :class:`RecordError` naming the first failed cell.

    ``live=False`` (the record) leaves out the cells of the live screen (tagged ``interactive``):
    the record never shows them, and building every live plot costs seconds. ``km``: a kernel
    from :func:`start_kernel`, left running (the caller stops it); None starts and stops one.
    """
    template = template or workbook_template()
    own = km is None
    if own:
        km = start_kernel(project_dir)
    try:
        return _execute(project_dir, interpretation_file, template, timeout_s, live, km, units)
    finally:
        if own:
            stop_kernel(km)


def _execute(project_dir: Path, interpretation_file: Path | None, template: Path, timeout_s: int, live: bool,
             km: AsyncKernelManager, units: str | None = None) -> nbformat.NotebookNode:
    import nbformat
    from nbclient import NotebookClient
    from nbclient.exceptions import CellExecutionError

    if not template.is_file():
        raise RecordError(f"{template}: workbook template not found; name an existing .ipynb file.")
    nb = nbformat.read(template, as_version=4)
    if not live:
        nb.cells = [c for c in nb.cells if LIVE_TAG not in c.get("metadata", {}).get("tags", [])]
    params: dict[str, object] = {"project_dir": str(project_dir.resolve())}
    params["interpretation_file"] = str(interpretation_file.resolve()) if interpretation_file else None
    if units is not None:
        params["display_units"] = units
    inject_parameters(nb, params)
    client = NotebookClient(nb, km=km, timeout=timeout_s, kernel_name=KERNEL)
    try:
        client.execute()
    except CellExecutionError as exc:
        index = next((i for i, c in enumerate(nb.cells)
                      if any(o.get("output_type") == "error" for o in c.get("outputs", []))), None)
        if index is None:  # a ShearbookError shown in words (views.setup_notebook): the last cell that ran
            index = max((i for i, c in enumerate(nb.cells) if c.get("execution_count")), default=None)
        err = next((o for c in nb.cells for o in c.get("outputs", []) if o.get("output_type") == "error"),
                   {"ename": exc.ename, "evalue": exc.evalue})
        where = f"cell {index + 1}" if index is not None else "a cell"
        first_line = nb.cells[index].source.splitlines()[0] if index is not None and nb.cells[index].source else ""
        raise RecordError(
            f"{template.name}: {where} ({first_line!r}) raised {err.get('ename', 'an error')}: "
            f"{err.get('evalue', exc)}. No record was written; fix the cause and export again."
        ) from None
    return nb


class _Refs(HTMLParser):
    """Collects every URL an HTML page would fetch by itself."""

    FETCHING = ("src", "data", "poster", "srcset")  # attributes a browser fetches by itself, on any element

    def __init__(self) -> None:
        super().__init__()
        self.refs: list[str] = []
        self._in_style = False

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self._in_style = tag == "style"
        for name, value in attrs:
            fetches = name in self.FETCHING or (tag == "link" and name == "href")  # <a href> is a link, not a fetch
            if fetches and value and not value.startswith(("data:", "#")):
                self.refs.append(f"<{tag} {name}={value}>")

    def handle_endtag(self, tag: str) -> None:
        if tag == "style":
            self._in_style = False

    def handle_data(self, data: str) -> None:
        if self._in_style:
            for m in re.finditer(r"(?:@import\s+|url\()\s*['\"]?((?:https?:)?//[^'\")\s]+)", data):
                self.refs.append(f"css {m.group(1)}")


def network_references(html_text: str) -> list[str]:
    """Every reference in the page to a script, style, image or frame outside the file itself."""
    parser = _Refs()
    parser.feed(html_text)
    return parser.refs


def export_html(nb: nbformat.NotebookNode, view: View) -> str:
    """HTML of an executed notebook; the report view hides the code, the audit view shows it."""
    import nbformat
    from nbconvert import HTMLExporter
    from nbconvert.preprocessors import TagRemovePreprocessor

    exporter = HTMLExporter(template_name="shearbook_record", extra_template_basedirs=[str(record_templates_dir())])
    exporter.exclude_input = view == "report"
    exporter.exclude_input_prompt = True
    exporter.exclude_output_prompt = True
    # The live screen (cells tagged "interactive") needs a kernel; the record keeps the static cells.
    exporter.register_preprocessor(TagRemovePreprocessor(remove_cell_tags={LIVE_TAG}, enabled=True), enabled=True)
    nb = nbformat.from_dict({**nb, "metadata": {k: v for k, v in nb.metadata.items()
                                                if k != "widgets"}})  # their state too
    body, _ = exporter.from_notebook_node(nb, resources={"metadata": {"name": "Shearbook record"}})
    return body


_BOKEH_JSON = re.compile(r"^(\s*const (?:docs_json|render_items) = )(.*);$", re.M)  # Bokeh's notebook embedding


def _script_safe_bokeh(js: str) -> str:
    """Bokeh's embedding script with its JSON literals made script-safe (``</script>`` in a title cannot end it)."""
    return _BOKEH_JSON.sub(lambda m: m.group(1) + script_safe(m.group(2)) + ";", js)


def make_scripts_safe(nb: nbformat.NotebookNode) -> nbformat.NotebookNode:
    """Every script the record will hold, checked: no user text in it can end the block or open a comment.

    nbconvert writes an ``application/javascript`` output inside a ``<script>`` block as it is, and
    Bokeh writes a figure's document (titles, legend labels, stage ids in the data) into that script as
    JSON literals that keep ``<`` and ``/`` as they are. Their JSON is rewritten with ``\u003c`` etc.
    (the same values); any script that still holds ``</script`` or ``<!--`` stops the export.
    """
    for index, cell in enumerate(nb.cells):
        for out in cell.get("outputs", []):
            data = out.get("data", {})
            if "application/javascript" in data:
                data["application/javascript"] = _script_safe_bokeh(data["application/javascript"])
                js = data["application/javascript"]
                unsafe = [u for u in unsafe_in_script(js) if u.lower().startswith("</script")]
                unsafe += [u for m in _BOKEH_JSON.finditer(js) for u in unsafe_in_script(m.group(2))]
                if unsafe:
                    raise RecordError(f"cell {index + 1}: a script of the record would hold {', '.join(unsafe)} "
                                      "outside a JSON string; no record was written. Report this as a bug.")
    return nb


def _published(nb: nbformat.NotebookNode, mime: str, template: Path) -> str:
    """The JSON the workbook published under ``mime`` (views.show_provenance), as mime.canonical_text."""
    for cell in nb.cells:
        for out in cell.get("outputs", []):
            if mime in out.get("data", {}):
                return canonical_text(out["data"][mime])
    raise RecordError(f"{template.name}: the workbook published no {mime} output (views.show_provenance); "
                      "no record was written.")


def _embed(html_text: str, blocks: dict[str, str]) -> str:
    safe = {name: script_safe(text) for name, text in blocks.items()}  # no "</script>" or "<!--" can change the block
    tags = "".join(f'<script type="application/json" id="{name}">{text}</script>\n' for name, text in safe.items())
    end = html_text.rindex("</body>")  # the last one: BokehJS holds the string "</body>" too
    return html_text[:end] + tags + html_text[end:]


def _write_atomic(path: Path, text: str) -> None:
    write_text_atomic(path, text)


@dataclass(frozen=True)
class Record:
    path: Path
    size_bytes: int
    results_sha256: str
    results: dict[str, Any]  # the results JSON embedded in the record, parsed


def default_record_path(project_dir: Path, view: View) -> Path:
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    return project_dir / "records" / f"shearbook-{view}-{stamp}.html"


def write_record(project_dir: str | Path, out: str | Path | None = None, interpretation_file: str | Path | None = None,
                 view: View = "report", template: Path | None = None, units: str | None = None) -> Record:
    """Execute the workbook on ``project_dir`` and write the HTML record; return where and what.

    ``units``: "SI" or "US" to show the record in those display units (None: the project's own).
    """
    root = Path(project_dir).resolve()
    template = template or workbook_template()
    load_project(root)  # fail early with the project file's own message
    interp_path = Path(interpretation_file).resolve() if interpretation_file else root / INTERPRETATION_FILE
    km = start_kernel(root)  # it starts while the interpretation file is checked and nbconvert imported
    try:
        load_interpretation(interp_path)
        nb = execute_workbook(root, interp_path, template, km=km, units=units)
    finally:
        stop_kernel(km)
    results_json = _published(nb, RESULTS_MIME, template)
    interpretation_json = _published(nb, INTERPRETATION_MIME, template)
    html_text = export_html(make_scripts_safe(nb), view)
    refs = network_references(html_text)
    if refs:
        raise RecordError(
            f"the exported record would fetch from the network: {', '.join(refs[:5])}. Nothing was written."
        )
    html_text = _embed(html_text, {"shearbook-results": results_json, "shearbook-interpretation": interpretation_json,
                                   "shearbook-record": json_for_script({"view": view, "schema": RECORD_SCHEMA})})
    path = Path(out).resolve() if out else default_record_path(root, view)
    _write_atomic(path, html_text)
    return Record(path, len(html_text.encode("utf-8")), hashlib.sha256(results_json.encode()).hexdigest(),
                  json.loads(results_json))


# --- the record on paper -----------------------------------------------------------------------------------

Paper = Literal["a4", "letter"]
CHROMIUM_NAMES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable", "chrome")
CHROMIUM_PATHS = ("/Applications/Google Chrome.app/Contents/MacOS/Google Chrome",
                  "/Applications/Chromium.app/Contents/MacOS/Chromium")


def find_chromium() -> str | None:
    """A Chromium or Chrome on this machine: $SHEARBOOK_CHROMIUM, then the usual names on PATH and places."""
    import os

    named = os.environ.get("SHEARBOOK_CHROMIUM")
    if named:
        return named if Path(named).is_file() else None
    found = next((shutil.which(n) for n in CHROMIUM_NAMES if shutil.which(n)), None)
    return found or next((p for p in CHROMIUM_PATHS if Path(p).is_file()), None)


def write_pdf(record_html: str | Path, pdf: str | Path, paper: Paper = "a4", timeout_s: int = 240) -> Path:
    """Print a record to PDF with headless Chromium (every network request refused); written atomically.

    The page size is set for the print only (a copy of the record with ``@page {size: ...}``); the
    record's own print stylesheet gives the footer (project, record digest, page x of y), a new page
    for each stage and the figures scaled to the page.
    """
    import os
    import subprocess

    src, out = Path(record_html).resolve(), Path(pdf).resolve()
    exe = find_chromium()
    if exe is None:
        raise RecordError("--pdf needs Chromium or Google Chrome, and none was found (looked for "
                          f"{', '.join(CHROMIUM_NAMES)} on PATH and $SHEARBOOK_CHROMIUM). Install one (Debian: "
                          "apt-get install chromium) or set SHEARBOOK_CHROMIUM to its path; the HTML record "
                          f"{src} was written and can also be printed from any browser.")
    size = {"a4": "A4", "letter": "letter"}[paper]
    with tempfile.TemporaryDirectory(prefix="shearbook-pdf-") as tmp:
        page = Path(tmp) / "record.html"
        text = src.read_text(encoding="utf-8")
        head = text.index("</head>")
        sizes = f"<style>@page {{size: {size};}} @page wide {{size: {size} landscape;}}</style>"
        page.write_text(text[:head] + sizes + text[head:], encoding="utf-8")
        target = Path(tmp) / "record.pdf"
        cmd = [exe, "--headless", "--disable-gpu", "--no-first-run", "--disable-background-networking",
               "--disable-component-update", "--disable-sync", "--host-resolver-rules=MAP * ~NOTFOUND",
               f"--user-data-dir={Path(tmp) / 'profile'}", "--no-pdf-header-footer", "--virtual-time-budget=20000",
               "--run-all-compositor-stages-before-draw", f"--print-to-pdf={target}", page.as_uri()]
        if hasattr(os, "geteuid") and os.geteuid() == 0:
            cmd.insert(1, "--no-sandbox")  # Chromium refuses to run as root with its sandbox (containers, CI)
        try:
            done = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout_s, check=False)
        except subprocess.TimeoutExpired:
            raise RecordError(f"{exe} did not finish printing {src} within {timeout_s} s; "
                              "no PDF was written.") from None
        if not target.is_file() or target.read_bytes()[:5] != b"%PDF-":
            said = (done.stderr or "").strip().splitlines()
            raise RecordError(f"{exe} printed no PDF of {src} (exit {done.returncode}"
                              + (f": {said[-1]}" if said else "") + "). The HTML record was written.")
        out.parent.mkdir(parents=True, exist_ok=True)
        staged = out.with_name(f".{out.name}.tmp")
        shutil.copyfile(target, staged)
        os.replace(staged, out)
    return out
