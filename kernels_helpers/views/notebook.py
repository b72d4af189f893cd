"""Display glue for the workbook: shows the tables and figures of a :class:`Results`.

``setup_notebook()`` must be called in the notebook (never at import): it loads BokehJS inline so
the page and the exported record work offline.
"""

from __future__ import annotations

import importlib.metadata
import json
from datetime import UTC, datetime
from pathlib import Path

from bokeh.io import curdoc, output_notebook, show
from bokeh.resources import Resources
from IPython.display import HTML, display

from ..errors import ShearbookError
from ..interpretation import load_interpretation
from ..project import Project
from ..results import INTERPRETATION_MIME, RESULTS_MIME, Results
from . import tables
from .figures import DISPLAY_POINTS, envelope_figure, stage_figure

__all__ = ["setup_notebook", "show_envelopes", "show_header", "show_provenance", "show_stages", "show_tables"]

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


def show_static(obj) -> None:
    """Show a Bokeh layout as a static output cell.

    ``bokeh.io.show`` adds every object it shows to the session document and walks all of that
    document's models again on each call, so a record of thirty figures paid for the first figure
    thirty times. A record's figures never talk back to the kernel, so the document is emptied first:
    each call costs only its own figure.
    """
    curdoc().clear()
    show(obj)


def _h(text: str, level: int = 3) -> None:
    display(HTML(f"<h{level}>{tables.esc(text)}</h{level}>"))


def show_header(results: Results, project: Project) -> None:
    display(HTML(tables.header_html(results)))
    display(HTML(tables.caution_html()))
    _h("Inputs (raw readings, never modified)")
    display(HTML(tables.inputs_table(results, project)))
    _h("Specimens")
    display(HTML(tables.specimen_table(results, project)))
    r = results.settings["reduction"]
    pk = results.settings["picks"]
    display(HTML(
        "<p>Reduction: stresses on the <b>{area}</b> area; rate of dilation by Savitzky-Golay (quadratic) over "
        "{w} mm; peak located on shear stress smoothed over {ps} mm; start of shear where the force first reaches "
        "{sf:g} % of its maximum (seating slack before it removed and recorded). Critical state: mean over the last "
        "{cw} mm, reached when |mean dy/dx| &le; {rt} and tau/sigma changes by &le; {tt:g} % across the window. "
        "Curves drawn with at most {n} points per series (LTTB decimation, display only; every reading is used "
        "in the computation).</p>".format(
            area=tables.esc(r["area_convention"]), w=r["smoothing_window_mm"], ps=r["peak_smoothing_mm"],
            sf=r["seating_fraction"] * 100, cw=pk["cs_window_mm"], rt=pk["cs_rate_tolerance"],
            tt=pk["cs_trend_tolerance"] * 100, n=DISPLAY_POINTS,
        )
    ))


def show_stages(results: Results) -> None:
    """One row of plots per stage, suggested and chosen picks marked."""
    for s in results.stages:
        show_static(stage_figure(s))


def show_tables(results: Results) -> None:
    _h("Method: how the suggestions and flags were made")
    display(HTML(tables.method_html(results)))
    _h("Picks")
    display(HTML(tables.picks_table(results)))
    residual = tables.residual_table(results)
    if residual:
        _h("Residual strength (reversal tests)")
        display(HTML(residual))
    _h("Flags")
    display(HTML(tables.flags_table(results)))


def show_envelopes(results: Results) -> None:
    """Envelope plot of every group and the table of c' and phi'."""
    for group in dict.fromkeys(e.group for e in results.envelopes):
        show_static(envelope_figure(results, group))
    display(HTML(tables.envelope_table(results)))
    _h("Sensitivity: each stage left out in turn")
    display(HTML(tables.sensitivity_table(results)))
    display(HTML(tables.caution_html()))


def show_changes_since_record(project: Project, interpretation_path: str | Path) -> None:
    """The diff, in words, between this interpretation and the one of the newest record in records/."""
    from ..diff import diff_interpretations
    from ..interpretation import from_dict
    from ..verify import read_record

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
    made = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    extra = {}
    for name in RECORD_PACKAGES:
        try:
            extra[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            extra[name] = "not installed"
    interpretation = load_interpretation(interpretation_path)
    _h("Sign-off")
    display(HTML(tables.signoff_table(interpretation.signoff)))
    _h("Provenance")
    display(HTML(tables.provenance_table(results, made, interpretation_path, extra)))
    # machine-readable copies for the record (not shown; the record embeds them as JSON blocks)
    display({RESULTS_MIME: json.loads(results.to_json()), INTERPRETATION_MIME: json.loads(interpretation.to_json()),
             "text/plain": ""}, raw=True)
