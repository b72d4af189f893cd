"""The sections of the record: what a reader sees, built by one function each, shown and verified alike.

Each section is a function of the results, the project and the interpretation (and, for one
section, a notebook argument) that returns its *parts* in order: HTML text or a figure not yet
drawn (:class:`.figures.Plot`: its data, and how to draw it). The workbook shows them with
:func:`show_section`, which draws each figure and marks every part (an HTML part in a
``<div data-sb-section=... data-sb-part=...>``, a figure by a tag on its root), and :mod:`.visible`
rebuilds the same parts from a re-run to compare them with what a record shows, figures as their data.
A section that is not in :data:`SECTIONS` (the changes since the last record, the provenance with
its time of making) is shown but not compared: it depends on more than the results.
"""

from __future__ import annotations

import functools
import json
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

from bokeh.embed.notebook import notebook_content
from bokeh.io.notebook import EXEC_MIME_TYPE, HTML_MIME_TYPE, JS_MIME_TYPE, publish_display_data
from bokeh.model import Model
from bokeh.model.util import collect_models
from bokeh.models import ColumnDataSource
from IPython.display import HTML, display

from ..decisions import Interpretation
from ..display_units import SI, Display, display_for
from ..mime import digest_of
from ..project import Project
from ..results import Results
from ..signatures import Check, check_history
from . import design_views as dv
from . import tables
from .consolidation_views import consolidation_plot, rate_table
from .figures import DISPLAY_POINTS, Plot, envelope_plot, stage_plot
from .first_page import first_page_html
from .strength_figures import critical_state_plot, taylor_plot

__all__ = ["PART_TAG", "SECTIONS", "SOURCE_TAG", "Context", "build_section", "show_section", "show_static",
           "sources_of", "use_units"]

PART_TAG = "sb-part:"  # the tag on a figure's root: "sb-part:<section>:<index>"
SOURCE_TAG = "sb-source:"  # the tag on each data source of a figure: "sb-source:<n>", in model order
Part = str | Plot  # HTML text, or a figure before it is drawn (its data and how to draw it)


@dataclass(frozen=True)
class Context:
    """What a section is made from: the results, the project and the interpretation (with its sign-off)."""

    results: Results
    project: Project | None = None
    interpretation: Interpretation | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    @functools.cached_property
    def results_json(self) -> dict[str, Any]:
        """The results as their JSON form (what the record embeds), made once per section."""
        return json.loads(self.results.to_json())

    @property
    def u(self) -> Display:
        """The display units of this section: ``units`` among its arguments ("SI" when not given)."""
        return display_for(self.extra.get("units"))


def show_static(obj: Model) -> None:
    """Show a Bokeh layout as a static output cell: the two outputs ``bokeh.io.show`` gives in a notebook.

    ``bokeh.io.show`` also adds the object to the session's document (a walk of all its models), only
    so that the page can talk back to the kernel; ``notebook_content`` serialises it in a document of
    its own either way. A record's figures never talk back, so they stay out of the session's document:
    each figure costs only its own models, once.
    """
    script, div, _ = notebook_content(obj)
    publish_display_data({HTML_MIME_TYPE: div})
    publish_display_data({JS_MIME_TYPE: script, EXEC_MIME_TYPE: ""}, metadata={EXEC_MIME_TYPE: {"id": obj.id}})


def _h(text: str) -> str:
    return f"<h3>{tables.esc(text)}</h3>"


def _header(ctx: Context) -> list[Part]:
    results, project, u = ctx.results, ctx.project, ctx.u
    assert project is not None
    r, pk = results.settings["reduction"], results.settings["picks"]
    method = (
        "<p>Reduction: stresses on the <b>{area}</b> area; rate of dilation by Savitzky-Golay (quadratic) over "
        "{w} mm; peak located on shear stress smoothed over {ps} mm; start of shear where the force first reaches "
        "{sf:g} % of its maximum (seating slack before it removed and recorded). Critical state: mean over the last "
        "{cw} mm, reached when |mean dy/dx| &le; {rt} and tau/sigma changes by &le; {tt:g} % across the window. "
        "Curves drawn with at most {n} points per series (LTTB decimation, display only; every reading is used "
        "in the computation).</p>".format(
            area=tables.esc(r["area_convention"]), w=r["smoothing_window_mm"], ps=r["peak_smoothing_mm"],
            sf=r["seating_fraction"] * 100, cw=pk["cs_window_mm"], rt=pk["cs_rate_tolerance"],
            tt=pk["cs_trend_tolerance"] * 100, n=DISPLAY_POINTS))
    return [tables.header_html(results, u) + tables.caution_html(),
            _h("Inputs (raw readings, never modified)") + tables.inputs_table(results, project),
            _h("Specimens") + tables.specimen_table(results, project, u) + u.annotate(method)
            + tables.apparatus_html(results, project, u)]


def _stages(ctx: Context) -> list[Part]:
    out: list[Part] = []
    for s in ctx.results.stages:
        out.append(tables.stage_heading(s, ctx.u))
        out.append(stage_plot(s, ctx.u))
    return out


def _picks(ctx: Context) -> list[Part]:
    results, u = ctx.results, ctx.u
    out = _h("Method: how the suggestions and flags were made") + tables.method_html(results, u)
    out += _h("Picks") + tables.picks_table(results, u)
    residual = tables.residual_table(results, u)
    if residual:
        out += _h("Residual strength (reversal tests)") + residual
    return [out + _h("Flags") + tables.flags_table(results, u)]


def _consolidation(ctx: Context) -> list[Part]:
    results = ctx.results
    stages = [s for s in results.stages if s.consolidation is not None]
    if not stages:
        return ["<p>No consolidation readings in this project (optional consolidation_file per stage).</p>"]
    rule = results.settings.get("rate", {}).get("time_to_failure", "largest")
    said = ("the largest of 50 t_50, 11.6 t_90 and 12.7 t_100 that the constructions give (the cautious choice)"
            if rule == "largest" else f"t_f = {tables.esc(rule)}, as chosen in the interpretation file's settings")
    return [*(consolidation_plot(s, ctx.u) for s in stages),
            f"<p>Required time to failure: {said}; settings.rate.time_to_failure in the interpretation "
            "file chooses the rule the governing standard states.</p>" + rate_table(results, ctx.u)]


def _envelopes(ctx: Context) -> list[Part]:
    results = ctx.results
    groups = dict.fromkeys(e.group for e in results.envelopes)
    figures: list[Part] = [envelope_plot(results, g, ctx.u) for g in groups]
    return [*figures, tables.envelope_table(results, ctx.u) + _h("Sensitivity: each stage left out in turn")
            + tables.sensitivity_table(results, ctx.u) + tables.caution_html()]


def _statistics(ctx: Context) -> list[Part]:
    at = ctx.extra.get("angles_at_kpa")
    return [dv.statistics_table(ctx.results, ctx.u) + dv.power_law_angle_table(ctx.results, at, ctx.u)]


def _sets(ctx: Context) -> list[Part]:
    return [dv.set_comparison_table(ctx.results, ctx.u)]


def _critical_state_line(ctx: Context) -> list[Part]:
    lines = ctx.results.critical_state_lines
    pooled = [line for line in lines if line.group.startswith("stratum ")]
    return [*(critical_state_plot(ctx.results, line, ctx.u) for line in pooled or lines),  # dense and loose
            dv.critical_state_table(ctx.results, ctx.u)]


def _dilatancy(ctx: Context) -> list[Part]:
    sets: dict[str, list[str]] = {}
    for s in ctx.results.stages:
        sets.setdefault(s.test_set or "all stages", []).append(s.stage_id)
    return [*(taylor_plot(ctx.results, ids, ctx.u) for ids in sets.values()), dv.dilatancy_table(ctx.results)]


def _design(ctx: Context) -> list[Part]:
    return [dv.design_html(ctx.results, ctx.u) + tables.caution_html()]


def signature_checks(ctx: Context) -> list[Check]:
    """Each sign-off step's signature checked against these results and this interpretation (signers not judged)."""
    assert ctx.interpretation is not None
    results = ctx.results_json
    return check_history(ctx.interpretation.signoff.history, results["provenance"]["raw_files"],
                         json.loads(ctx.interpretation.to_json()), results, None)


def _summary(ctx: Context) -> list[Part]:
    digest = digest_of(ctx.results_json)
    checks = signature_checks(ctx) if ctx.interpretation is not None else []
    return [first_page_html(ctx.results, ctx.interpretation, checks, digest, ctx.u)]


def _signoff(ctx: Context) -> list[Part]:
    assert ctx.interpretation is not None
    return [_h("Sign-off") + tables.signoff_table(ctx.interpretation.signoff, signature_checks(ctx))]


SECTIONS: dict[str, Callable[[Context], list[Part]]] = {
    "summary": _summary, "header": _header, "stages": _stages, "picks": _picks, "consolidation": _consolidation,
    "envelopes": _envelopes, "statistics": _statistics, "sets": _sets, "critical_state_line": _critical_state_line,
    "dilatancy": _dilatancy, "design": _design, "signoff": _signoff,
}


def build_section(name: str, ctx: Context) -> list[str | Model]:
    """The parts of section ``name``: HTML text, and each figure drawn and tagged with its place and its data
    sources with their order (:data:`PART_TAG`, :data:`SOURCE_TAG`)."""
    out: list[str | Model] = []
    for i, part in enumerate(SECTIONS[name](ctx)):
        if isinstance(part, Plot):
            figure = part.figure()
            figure.tags = [*figure.tags, f"{PART_TAG}{name}:{i}"]
            for n, source in enumerate(sources_of(figure), start=1):
                source.tags = [*source.tags, f"{SOURCE_TAG}{n}"]
            out.append(figure)
        else:
            out.append(part)
    return out


def sources_of(part: Model) -> list[ColumnDataSource]:
    """The data sources of a figure, in Bokeh's own deterministic walk of its models."""
    return [m for m in collect_models(part) if isinstance(m, ColumnDataSource)]


def part_html(name: str, index: int, html: str, args: dict[str, Any] | None = None) -> str:
    """An HTML part inside its marker, with the section's arguments (as JSON) when it has any."""
    extra = f' data-sb-args="{tables.esc(json.dumps(args, sort_keys=True))}"' if args else ""
    return f'<div class="sb-part" data-sb-section="{name}" data-sb-part="{index}"{extra}>{html}</div>'


_UNITS: list[Display] = [SI]  # the notebook's display units (use_units); stored values are never converted


def use_units(units: str | Display | None) -> Display:
    """Show every later section in ``units`` ("SI", "US" or None for SI); returns the Display now in use."""
    _UNITS[0] = units if isinstance(units, Display) else display_for(units, "display units")
    return _UNITS[0]


# Where the record's sections go while a live screen is open in this kernel: computed on request, from the
# live state, into placeholders (see views.record_part); None (the record, a notebook without a live screen): now.
Job = Callable[[Results, Interpretation], None]
_DEFERRED: list[Callable[[Job], None] | None] = [None]


def defer_sections(to: Callable[[Job], None] | None) -> None:
    """From now on, hand each section to ``to`` (a job to run later with the live results) instead of showing it."""
    _DEFERRED[0] = to


def deferred(job: Job) -> bool:
    """True when ``job`` was handed on to run later (a live screen is open); False: the caller shows it now."""
    if _DEFERRED[0] is None:
        return False
    _DEFERRED[0](job)
    return True


def show_section(name: str, results: Results, project: Project | None = None,
                 interpretation: Interpretation | None = None, **args: Any) -> None:
    """Display every part of section ``name`` (HTML parts marked, figures tagged) for the record.

    Outside SI the display units join the section's arguments, so that verify rebuilds it alike.
    With a live screen open, the section is shown when asked for, from the live results.
    """
    args = {k: list(v) if isinstance(v, Sequence) and not isinstance(v, str) else v for k, v in args.items()}
    if not _UNITS[0].is_si:
        args["units"] = _UNITS[0].system
    wants_interpretation = interpretation is not None
    if deferred(lambda r, i: _show_parts(name, Context(r, project, i if wants_interpretation else None, args))):
        return
    _show_parts(name, Context(results, project, interpretation, args))


def _show_parts(name: str, ctx: Context) -> None:
    args = ctx.extra
    for i, part in enumerate(build_section(name, ctx)):
        if isinstance(part, str):
            display(HTML(part_html(name, i, part, args)))
        else:
            show_static(part)
