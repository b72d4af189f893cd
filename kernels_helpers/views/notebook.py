"""Display glue for the workbook: shows the tables and figures of a :class:`Results`.

``setup_notebook()`` must be called in the notebook (never at import): it loads BokehJS inline so
the page and the exported record work offline.
"""

from __future__ import annotations

import importlib.metadata
import json
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path

from bokeh.io import output_notebook
from bokeh.resources import Resources
from IPython.display import HTML, display

from ..errors import ShearbookError
from ..interpretation import load_interpretation
from ..project import Project
from ..results import INTERPRETATION_MIME, RESULTS_MIME, Results
from . import tables
from .sections import deferred, show_section, show_static, use_units

__all__ = ["setup_notebook", "show_changes_since_record", "show_consolidation", "show_critical_state_line",
           "show_design", "show_dilatancy", "show_envelope_statistics", "show_envelopes", "show_header",
           "show_provenance", "show_set_comparison", "show_stages", "show_static", "show_summary", "show_tables",
           "use_units"]

RECORD_PACKAGES = ("bokeh", "jupyterlab", "ipywidgets", "jupyter_bokeh", "nbconvert", "nbclient", "tsdownsample")


def setup_notebook() -> None:
    """Load BokehJS into the page, inline (no CDN), trimmed to the parts the figures use.

    Also shows Shearbook's own errors (a bad project file, a readings file that does not read) as
    their message in words, not as a Python traceback. The cell still fails, so an export stops there.
    """
    output_notebook(resources=Resources(mode="inline", components=["bokeh", "bokeh-widgets"]), hide_banner=True)
    display(HTML(tables.STYLE))
    from IPython import get_ipython

    shell = get_ipython()
    if shell is not None:
        shell.set_custom_exc((ShearbookError,), _show_shearbook_error)


def _show_shearbook_error(shell: object, etype: type, value: BaseException, tb: object,
                          tb_offset: int | None = None) -> list[str]:
    """IPython's handler for :class:`ShearbookError`: the message, said once, with what to do."""
    del shell, etype, tb, tb_offset
    display(HTML(f'<div class="sb-flag sb-error"><b>Shearbook cannot go on:</b><pre>{tables.esc(str(value))}</pre>'
                 "Fix what it names (the raw readings are never changed), then run the cells again.</div>"))
    return [f"ShearbookError: {value}"]


def show_summary(results: Results, interpretation_path: str | Path) -> None:
    """The record's first page: design parameters, envelopes per set, open flags, sign-off, record digest."""
    show_section("summary", results, interpretation=load_interpretation(interpretation_path))


def show_header(results: Results, project: Project) -> None:
    show_section("header", results, project)


def show_stages(results: Results) -> None:
    """One row of plots per stage, suggested and chosen picks marked; each under a heading of its own."""
    show_section("stages", results)


def show_tables(results: Results) -> None:
    """The method, the picks (and residual strengths) and the flags."""
    show_section("picks", results)


def show_consolidation(results: Results) -> None:
    """Both constructions of every consolidation stage, then the rate table."""
    show_section("consolidation", results)


def show_envelopes(results: Results) -> None:
    """Envelope plot of every group, the table of c' and phi', and the sensitivity."""
    show_section("envelopes", results)


def show_envelope_statistics(results: Results, angles_at_kpa: Sequence[float] | None = None) -> None:
    """The statistics tables of every fitted envelope (its bands and power law are drawn on its envelope plot).

    ``angles_at_kpa``: normal stresses (kPa) at which to give the power-law secant and tangent angles;
    None gives the ends and middle of the design range.
    """
    show_section("statistics", results, angles_at_kpa=angles_at_kpa)


def show_set_comparison(results: Results) -> None:
    show_section("sets", results)


def show_critical_state_line(results: Results) -> None:
    show_section("critical_state_line", results)


def show_dilatancy(results: Results) -> None:
    """Taylor's ratio along the curves of each test set, and the angle table (interpretation aids)."""
    show_section("dilatancy", results)


def show_design(results: Results) -> None:
    """Characteristic and design values with the method, the caution and the general caution."""
    show_section("design", results)


def show_changes_since_record(project: Project, interpretation_path: str | Path) -> None:
    """The diff, in words, between this interpretation and the one of the newest record in records/."""
    from ..diff import diff_interpretations
    from ..interpretation import from_dict
    from ..verify import read_record

    if deferred(lambda r, i: show_changes_since_record(project, interpretation_path)):  # read when asked for
        return
    records = sorted((project.root / "records").glob("*.html"), key=lambda p: p.stat().st_mtime)
    if not records:
        display(HTML("<p>No earlier record in this project's records/ folder: nothing to compare with.</p>"))
        return
    last = records[-1]
    before = from_dict(read_record(last)[1], f"{last} (embedded interpretation)")
    report = diff_interpretations(project, before, load_interpretation(interpretation_path))
    text = report.to_text(f"the record {last.name}", "this interpretation")
    display(HTML(f'<pre class="sb-diff">{tables.esc(text)}</pre>'))


def show_provenance(results: Results, interpretation_path: str) -> None:
    if deferred(lambda r, i: show_provenance(r, interpretation_path)):  # a live screen is open: when asked for
        return
    made = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    extra = {}
    for name in RECORD_PACKAGES:
        try:
            extra[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            extra[name] = "not installed"
    interpretation = load_interpretation(interpretation_path)
    show_section("signoff", results, interpretation=interpretation)
    display(HTML("<h3>Provenance</h3>" + tables.provenance_table(results, made, interpretation_path, extra)))
    # machine-readable copies for the record (not shown; the record embeds them as JSON blocks)
    display({RESULTS_MIME: json.loads(results.to_json()), INTERPRETATION_MIME: json.loads(interpretation.to_json()),
             "text/plain": ""}, raw=True)
