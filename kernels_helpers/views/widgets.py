"""The live workbook's screen: Bokeh plots and ipywidgets wired to one :class:`Controller`.

Widgets never compute: every callback calls one controller edit (which goes through the
Interpretation's edit methods and the pipeline) and then shows what the controller reports. The
Bokeh callbacks guard against jupyter_bokeh's echo of our own writes and its double calls: they
return early when the incoming data is what the current pick already draws.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import math
import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import ipywidgets as W
from bokeh.protocol import Protocol
from jupyter_bokeh.widgets import BokehModel

from ..controller import Controller
from ..decisions import Cohesion, utc_now
from ..display_units import SI, Display, display_for
from ..escaping import dom_key
from ..notices import fit_changes, standing_notices
from ..results import Results, StageResult
from . import tables
from .live_plots import EnvelopePlot, LivePlots, StagePlots, marker_data, residual_data, window_data
from .record_part import RecordPart

__all__ = ["LiveWorkbook", "live_workbook"]

def _float_text(description: str, value: float, css: str, u: Display = SI) -> W.FloatText:
    """A displacement typed in display units: ``value`` is canonical (mm)."""
    step = 0.01 if u.is_si else 0.0005
    w = W.FloatText(value=_shown_mm(u, value), step=step, description=f"{description} ({u.unit('length')})",
                    style={"description_width": "125px"}, layout=W.Layout(width="265px"))
    w.add_class(css)
    return w


def _shown_mm(u: Display, value_mm: float) -> float:
    """A displacement as the number box shows it: 3 decimals of mm, 4 of inches."""
    return round(u.value("length", value_mm), 3 if u.is_si else 4)


class _Guard:
    """True while the screen writes its own widget values (their observers must do nothing)."""

    def __init__(self) -> None:
        self.active = False

    def run(self, fn: Callable[[], None]) -> None:
        self.active, before = True, self.active
        try:
            fn()
        finally:
            self.active = before


class StagePanel:
    """The stage being interpreted: its plots (in the live screen's Bokeh document), number twins, resets."""

    def __init__(self, wb: LiveWorkbook, s: StageResult) -> None:
        self.wb, self.sid, u = wb, s.stage_id, wb.u
        c = wb.controller
        reversal = any(c.stage(sid).residual is not None for sid in c.stage_ids)
        self.plots = StagePlots(s, self.on_peak_drag, self.on_window_drag, self.on_residual_drag, reversal, u,
                                c.row_of_line(s.stage_id))
        self.peak_x = _float_text("peak at x", s.peak.chosen.x_mm, "sb-peak-x", u)
        self.cs_from = _float_text("window from", s.critical_state.chosen.x_from_mm, "sb-cs-from", u)
        self.cs_to = _float_text("window to", s.critical_state.chosen.x_to_mm, "sb-cs-to", u)
        required = c.project.manual_pick_reason == "require"
        self.reason = W.Text(continuous_update=False, layout=W.Layout(width="265px"),
                             placeholder="reason for a manual pick" + (" (required)" if required else ""))
        self.reason.add_class("sb-pick-reason")
        self.reason.observe(lambda ch: None if self.wb.guard.active else self.wb.act(
            lambda c: c.set_pick_reason(self.sid, ch["new"])), "value")
        self.peak_reset = W.Button(description="peak: back to suggestion", layout=W.Layout(width="260px"))
        self.cs_reset = W.Button(description="window: back to suggestion", layout=W.Layout(width="260px"))
        self.info = W.HTML()
        self.info.add_class("sb-stage-info")
        self.peak_x.observe(self.on_peak_typed, "value")
        self.cs_from.observe(self.on_window_typed, "value")
        self.cs_to.observe(self.on_window_typed, "value")
        self.peak_reset.on_click(lambda _: self.wb.act(lambda c: c.back_to_suggestion(self.sid, "peak")))
        self.cs_reset.on_click(lambda _: self.wb.act(lambda c: c.back_to_suggestion(self.sid, "critical_state")))
        columns: list[W.Widget] = [
            W.VBox([W.HTML("<small>peak</small>"), self.peak_x, self.peak_reset, self.reason]),
            W.VBox([W.HTML("<small>critical-state window</small>"), self.cs_from, self.cs_to, self.cs_reset])]
        self.residual_pass: W.Dropdown | None = None
        if reversal:  # reversal tests: the residual window on one forward pass (hidden for other stages)
            self.residual_pass = W.Dropdown(options=[("pass 1", 1)], value=1, description="forward pass",
                                            style={"description_width": "125px"}, layout=W.Layout(width="265px"))
            self.residual_pass.add_class("sb-res-pass")
            self.res_from = _float_text("residual from", 0.0, "sb-res-from", u)
            self.res_to = _float_text("residual to", 0.0, "sb-res-to", u)
            self.res_reset = W.Button(description="residual: back to suggestion", layout=W.Layout(width="260px"))
            for w in (self.residual_pass, self.res_from, self.res_to):
                w.observe(self.on_residual_typed, "value")
            self.res_reset.on_click(lambda _: self.wb.act(lambda c: c.back_to_suggestion(self.sid, "residual")))
            self.residual_box = W.VBox([W.HTML("<small>residual window (mean |tau| over it)</small>"),
                                        self.residual_pass, self.res_from, self.res_to, self.res_reset])
            columns.append(self.residual_box)
        self.controls = W.VBox([
            W.HTML("<small>Drag the amber diamond (peak) or the teal squares (window ends) on the shear-stress plot, "
                   "or type a displacement and press Enter; picks snap to the nearest reading.</small>"),
            W.HBox(columns, layout=W.Layout(flex_flow="row wrap", grid_gap="0 12px")), self.info],
            layout=W.Layout(flex="1 1 560px", min_width="0"))
        self.controls.add_class("sb-stage-controls")
        self.show(s)

    def show(self, s: StageResult) -> None:
        """Interpret stage ``s`` in this panel (its curves, picks, reason and flags)."""
        c = self.wb.controller
        if s.stage_id != self.sid:
            self.sid = s.stage_id
            self.plots.row_of_line = c.row_of_line(s.stage_id)
        d = c.interpretation.decision(self.sid)
        c.reasons.setdefault(self.sid, d.peak.note or d.critical_state.note)
        self.wb.guard.run(lambda: setattr(self.reason, "value", c.reasons[self.sid]))
        self.update(s)

    # Bokeh callbacks: (attr, old, new) as jupyter_bokeh calls them, twice, and with our own echo. The page
    # works in display units; the controller in mm (mm() turns a displayed displacement back into mm).
    def mm(self, shown: float) -> float:
        return self.wb.u.canonical("length", float(shown))

    def on_peak_drag(self, attr: str, old: Any, new: Any) -> None:
        if self.wb.guard.active or not new.get("x"):
            return  # our own write
        if _same(new, marker_data(self.wb.controller.stage(self.sid), self.wb.u)):
            return  # our own write coming back, or the second call of one change
        self.wb.act(lambda c: c.move_peak(self.sid, self.mm(new["x"][0])), redraw=True)

    def on_window_drag(self, attr: str, old: Any, new: Any) -> None:
        xs = list(new.get("x", []))
        if self.wb.guard.active or len(xs) != 2 or _same(new, window_data(self.wb.controller.stage(self.sid),
                                                                           self.wb.u)):
            return
        self.wb.act(lambda c: c.set_window(self.sid, self.mm(min(xs)), self.mm(max(xs))), redraw=True)

    def on_peak_typed(self, change: dict[str, Any]) -> None:
        if not self.wb.guard.active:
            self.wb.act(lambda c: c.move_peak(self.sid, self.mm(change["new"])), redraw=True)

    def on_window_typed(self, change: dict[str, Any]) -> None:
        if not self.wb.guard.active:
            self.wb.act(lambda c: c.set_window(self.sid, self.mm(self.cs_from.value), self.mm(self.cs_to.value)),
                        redraw=True)

    def on_residual_drag(self, attr: str, old: Any, new: Any) -> None:
        xs = list(new.get("x", []))
        c = self.wb.controller
        pick = c.residual_pick(self.sid)
        if self.wb.guard.active or len(xs) != 2 or pick is None or _same(new, residual_data(c.stage(self.sid), pick,
                                                                                           self.wb.u)):
            return  # our own write coming back, the second call of one change, or a stage without a residual
        self.wb.act(lambda c: c.set_residual(self.sid, pick[0], self.mm(min(xs)), self.mm(max(xs))), redraw=True)

    def on_residual_typed(self, change: dict[str, Any]) -> None:
        if not self.wb.guard.active and self.residual_pass is not None:
            self.wb.act(lambda c: c.set_residual(self.sid, self.residual_pass.value, self.mm(self.res_from.value),
                                                 self.mm(self.res_to.value)), redraw=True)

    def update(self, s: StageResult) -> None:
        pick = self.wb.controller.residual_pick(self.sid)
        self.plots.update(s, pick)
        u = self.wb.u

        def write() -> None:
            self.peak_x.value = _shown_mm(u, s.peak.chosen.x_mm)
            self.cs_from.value = _shown_mm(u, s.critical_state.chosen.x_from_mm)
            self.cs_to.value = _shown_mm(u, s.critical_state.chosen.x_to_mm)
            if self.residual_pass is not None:
                self.residual_box.layout.display = "none" if pick is None else ""
                if pick is not None:
                    forward = [(f"pass {p.pass_no}", p.pass_no) for p in s.passes if p.forward]
                    if list(self.residual_pass.options) != forward:
                        self.residual_pass.options = forward
                    self.residual_pass.value = pick[0]
                    self.res_from.value = _shown_mm(u, pick[1])
                    self.res_to.value = _shown_mm(u, pick[2])
        self.wb.guard.run(write)
        peak = "suggested" if s.peak.source == "suggested" else (
            f"manual (suggested {u.with_unit('length', s.peak.suggested.x_mm, 2)})")
        cs = "suggested" if s.critical_state.source == "suggested" else (
            f"manual (suggested {u.fmt('length', s.critical_state.suggested.x_from_mm, 2)}-"
            f"{u.with_unit('length', s.critical_state.suggested.x_to_mm, 2)})")
        distinct = f"<br><i>{tables.esc(u.annotate(s.no_distinct_peak))}</i>" if s.no_distinct_peak else ""
        residual = "" if pick is None else f"<br>residual: {tables.esc(residual_words(s, pick, u))}"
        excluded = ("" if s.included else
                    f'<br><span class="sb-flag">excluded: {tables.esc(s.exclusion_reason)}</span>')
        tau_peak, tau_cs = s.peak.chosen.tau_kpa, s.critical_state.chosen.tau_kpa
        self.info.value = (f"<small><b>{tables.esc(s.stage_id)}</b>: peak {tables.esc(peak)}, tau "
                           f"{u.with_unit('stress', tau_peak, 1)}{distinct}<br>critical state: {tables.esc(cs)}, "
                           f"tau {u.with_unit('stress', tau_cs, 1)}{residual}{excluded}</small>"
                           + stage_flags_html(s, u))


class BatchedBokehModel(BokehModel):
    """A BokehModel that, inside :meth:`batch`, sends every change of the document as one patch.

    jupyter_bokeh sends each Python change as a patch of its own (three comm messages each), and the
    page applies and lays out each one by itself: an edit that redraws a stage and its envelope made
    some thirty. Held and sent together they arrive in one message and are applied in one pass.
    """

    def __init__(self, model: Any, **kwargs: Any) -> None:
        self._held: list[Any] | None = None
        super().__init__(model, **kwargs)

    @contextlib.contextmanager
    def batch(self) -> Iterator[None]:
        if self._held is not None:  # already batching: the outer batch sends
            yield
            return
        self._held = []
        try:
            yield
        finally:
            events, self._held = self._held, None
            if events:
                self._send_patch(events)

    def flush(self) -> None:
        """Send what the batch holds so far (the batch goes on), and see it leave the kernel now.

        A kernel's messages go out through its IOPub thread, which needs the interpreter lock: while the
        edit goes on computing (the save, the tables), the patch's parts would leave one by one, tens of
        ms apart. ``sys.stdout.flush()`` in a kernel waits until that thread has sent everything queued
        before it (ipykernel's OutStream), so the plots reach the page before the rest is computed.
        """
        if self._held:
            events, self._held = self._held, []
            self._send_patch(events)
            sys.stdout.flush()

    def _document_patched(self, event: Any) -> None:
        if event.setter is self:  # the page's own change coming in: nothing to send back
            return
        if self._held is not None:
            self._held.append(event)
        else:
            self._send_patch([event])

    def _send_patch(self, events: list[Any]) -> None:
        msg = Protocol().create("PATCH-DOC", events)
        for part in (msg.header_json, msg.metadata_json, msg.content_json):
            self.send({"msg": "patch", "payload": part})
        for buffer in msg.buffers:
            self.send({"msg": "patch", "payload": json.dumps(buffer.ref)})
            self.send({"msg": "patch"}, [buffer.to_bytes()])


def stage_flags_html(s: StageResult, u: Display = SI) -> str:
    """Every flag of a stage, listed in full beside its plots (the table shows them folded)."""
    if not s.flags:
        return '<div class="sb-stage-flags"><small>no flags on this stage</small></div>'
    items = "".join(f"<li>{tables.esc(u.annotate(f))}</li>" for f in s.flags)
    return (f'<div class="sb-stage-flags"><b class="sb-flag">{len(s.flags)} flag(s) on this stage:</b>'
            f'<ul style="font-size: 11px; margin: 2px 0; padding-left: 14px">{items}</ul></div>')


def residual_words(s: StageResult, pick: tuple[int, float, float], u: Display = SI) -> str:
    """The residual in use, in words: value, pass, window and source (e.g. for the stage table)."""
    if s.residual is None:
        return "none (not a reversal test)"
    r = s.residual.chosen
    if r.tau_kpa is None:
        value = "not reached"
    else:
        bound = "" if r.reached else " (not reached: an upper bound)"
        value = f"{u.with_unit('stress', r.tau_kpa, 1)}{bound}"
    return (f"{value} on pass {pick[0]}, {u.fmt('length', pick[1], 2)}-{u.with_unit('length', pick[2], 2)} "
            f"({s.residual.source})")


def _same(new: Any, drawn: dict[str, list[float]]) -> bool:
    try:
        return all(len(new[k]) == len(v) and all(math.isclose(a, b, abs_tol=1e-9)
                                                 for a, b in zip(new[k], v, strict=True))
                   for k, v in drawn.items())
    except (KeyError, TypeError):
        return False


class StageTable:
    """One row per stage: normal stress, picks, flags, include (a reason is required) and a note."""

    HEAD = ("stage", "sigma'n", "peak tau", "critical state tau", "flags (click to read)",
            "included", "reason for excluding / note")

    def __init__(self, wb: LiveWorkbook) -> None:
        self.wb = wb
        self.rows: dict[str, dict[str, W.Widget]] = {}
        # a residual column only when the project holds reversal tests
        self.reversal = any(wb.controller.stage(sid).residual is not None for sid in wb.controller.stage_ids)
        S = wb.u.unit("stress")
        head = (self.HEAD[0], *(f"{h} ({S})" for h in self.HEAD[1:4]), *self.HEAD[4:])
        if self.reversal:
            head = (*head[:4], f"residual tau ({S})", *head[4:])
        cells: list[W.Widget] = [W.HTML(f"<b>{tables.esc(h)}</b>", layout=W.Layout(width="auto", min_width="0"))
                                 for h in head]
        for sid in wb.controller.stage_ids:
            cell = W.Layout(width="auto", min_width="0")
            r = {"show": W.Button(description=sid, tooltip=f"interpret {sid} on the live screen",
                                  layout=W.Layout(width="auto")),
                 "sigma": W.HTML(layout=cell), "peak": W.HTML(layout=cell), "cs": W.HTML(layout=cell),
                 "residual": W.HTML(layout=cell), "flags": W.HTML(layout=cell),
                 "include": W.Checkbox(description="", indent=False, layout=W.Layout(width="auto")),
                 "reason": W.Text(placeholder="required to exclude", continuous_update=False),
                 "note": W.Text(placeholder="note", continuous_update=False)}
            for key in ("show", "include", "reason", "note"):
                r[key].add_class(f"sb-{key}-{dom_key(sid)}")
            r["show"].on_click(lambda _, sid=sid: wb.select(sid))
            r["include"].observe(lambda ch, sid=sid: self.on_include(sid, ch["new"]), "value")
            r["reason"].observe(lambda ch, sid=sid: self.on_reason(sid, ch["new"]), "value")
            r["note"].observe(lambda ch, sid=sid: self.on_note(sid, ch["new"]), "value")
            self.rows[sid] = r
            for key in ("reason", "note"):
                r[key].layout = W.Layout(width="180px")
            r["residual"].add_class(f"sb-residual-{dom_key(sid)}")
            cells += [r["show"], r["sigma"], r["peak"], r["cs"],
                      *([r["residual"]] if self.reversal else []), r["flags"], r["include"],
                      W.VBox([r["reason"], r["note"]], layout=W.Layout(min_width="0"))]
        self.message = W.HTML()
        self.message.add_class("sb-table-message")
        columns = ("max-content 55px minmax(100px, 1fr) minmax(110px, 1fr) "
                   + ("minmax(110px, 1fr) " if self.reversal else "") + "minmax(110px, 1.2fr) 55px 184px")
        grid = W.GridBox(cells, layout=W.Layout(grid_template_columns=columns,
                                                grid_gap="2px 8px", align_items="center", width="100%"))
        self.widget = W.VBox([grid, self.message], layout=W.Layout(width="100%"))
        self.widget.add_class("sb-stage-table")
        self.update(wb.controller.results)

    def on_include(self, sid: str, included: bool) -> None:
        if self.wb.guard.active:
            return
        reason = self.rows[sid]["reason"].value
        self._act(lambda c: c.restore(sid) if included else c.exclude(sid, reason))

    def on_reason(self, sid: str, reason: str) -> None:
        if not self.wb.guard.active and not self.rows[sid]["include"].value:
            self._act(lambda c: c.exclude(sid, reason))

    def on_note(self, sid: str, note: str) -> None:
        if not self.wb.guard.active:
            self._act(lambda c: c.set_note(sid, note))

    def _act(self, edit: Callable[[Controller], bool]) -> None:
        """Run an edit; when refused, say why under the table and show again what the file says."""
        ok = self.wb.act(edit)
        self.message.value = "" if ok else f'<span class="sb-flag">{tables.esc(self.wb.last_message)}</span>'
        if not ok:
            self.update(self.wb.controller.results)

    def update(self, results: Results) -> None:
        u = self.wb.u

        def write() -> None:
            for s in results.stages:
                r = self.rows[s.stage_id]
                r["sigma"].value = u.fmt("stress", s.sigma_nominal_kpa, 0)
                no_peak = s.no_distinct_peak and s.peak.source == "suggested"
                pk = s.peak.chosen
                peak = "no distinct peak" if no_peak else u.fmt("stress", pk.tau_kpa, 1)
                r["peak"].value = f"{tables.esc(peak)} at {u.with_unit('length', pk.x_mm, 2)} ({s.peak.source})"
                cs = s.critical_state.chosen
                r["cs"].value = (f"{u.fmt('stress', cs.tau_kpa, 1)} over {u.fmt('length', cs.x_from_mm, 2)}-"
                                 f"{u.with_unit('length', cs.x_to_mm, 2)} ({s.critical_state.source})"
                                 + ('<br><span class="sb-flag">not reached: left out of the critical-state fit'
                                    "</span>" if s.critical_state_left_out else "")
                                 + (f"<br>not reached, used: {tables.esc(s.critical_state_reason)}"
                                    if s.critical_state_used else ""))
                pick = self.wb.controller.residual_pick(s.stage_id)
                r["residual"].value = "&ndash;" if pick is None else tables.esc(residual_words(s, pick, u))
                items = "".join(f"<li>{tables.esc(u.annotate(f))}</li>" for f in s.flags)
                r["flags"].value = (f'<details><summary class="sb-flag">{len(s.flags)} flag(s)</summary>'
                                    f'<ul style="font-size: 11px; margin: 0; padding-left: 14px">{items}</ul></details>'
                                    if s.flags else "none")
                r["include"].value = s.included
                if not s.included:
                    r["reason"].value = s.exclusion_reason
                r["note"].value = s.note
        self.wb.guard.run(write)
        self.mark_shown(self.wb.panel.sid)

    def mark_shown(self, stage_id: str) -> None:
        """Highlight the button of the stage on the screen."""
        for sid, r in self.rows.items():
            r["show"].button_style = "info" if sid == stage_id else ""


# The live screen fits the width it is given: text wraps, grid cells may shrink below their content's width.
LIVE_STYLE = """<style>
.sb-screen .widget-html-content {white-space: normal; overflow-wrap: break-word; line-height: 1.35;}
.sb-screen .sb-summary .widget-html-content, .sb-screen .sb-status .widget-html-content {overflow-wrap: anywhere;}
.sb-screen .widget-html, .sb-screen .widget-gridbox > * {min-width: 0;}
.sb-screen table.sb-table {max-width: 100%;}
</style>"""
STARTING = ("starting: the cells below are still running. An edit made now waits for them and is then applied "
            "(the status line says when it is saved).")
READY = "ready: drag a pick on the shear-stress plot, or type it below; the envelope follows. "


class LiveWorkbook:
    """The whole live screen, :attr:`screen`: choose a stage, drag its picks, watch the envelope refit.

    One working screen, from top to bottom: who is working and what happened last; the stage being
    interpreted (chosen from a list or from the stage table); its curves beside the envelope plot of
    one of its groups (one Bokeh document, so that the envelope follows a drag in the browser); the
    pick controls and flags beside the fitted parameters and notices; the stage table; the summary
    and the sign-off; the button that computes the record part below.
    """

    def __init__(self, controller: Controller, u: Display = SI) -> None:
        self.controller = controller
        self.u = u  # display units: what the screen shows and what is typed; the controller keeps mm and kPa
        self.guard = _Guard()
        self.last_message = ""
        self.is_ready = False
        self.author = W.Text(value=controller.author, description="author", placeholder="your name (recorded)",
                             continuous_update=True, layout=W.Layout(width="300px"))
        self.author.add_class("sb-author")
        self.author.observe(self.on_author, "value")
        self.undo = W.Button(description="undo last change", icon="undo", layout=W.Layout(width="170px"))
        self.undo.on_click(lambda _: self.act(lambda c: c.undo()))
        self.reload = W.Button(description="reload from file", icon="refresh", layout=W.Layout(width="170px"),
                               tooltip="read the interpretation file again (another writer saved it)")
        self.reload.on_click(lambda _: self.on_reload())
        self.ready_state = W.HTML()
        self.ready_state.add_class("sb-ready-state")
        self.status = W.HTML()
        self.status.add_class("sb-status")
        self.top = W.VBox([W.HBox([self.author, self.undo, self.reload, self.ready_state],
                                  layout=W.Layout(flex_flow="row wrap", align_items="center")), self.status])
        results = controller.results
        first = results.stages[0]
        self.panel = StagePanel(self, first)
        self.envelope_plot = EnvelopePlot(results, self._groups(first.stage_id)[0], u)
        self.live_plots = LivePlots(self.panel.plots, self.envelope_plot, u)
        # the document goes to the page as it is when the widget is made: its state must be complete by then
        self.live_plots.record_state(first, results)
        self.bokeh = BatchedBokehModel(self.live_plots.layout, layout=W.Layout(width="100%"))
        self.bokeh.add_class("sb-live-plots")
        self.choice = W.Dropdown(options=self._choices(results), value=first.stage_id, description="stage",
                                 style={"description_width": "45px"}, layout=W.Layout(width="360px"))
        self.choice.add_class("sb-stage-choice")
        self.choice.observe(lambda ch: None if self.guard.active else self.select(ch["new"]), "value")
        self.previous = W.Button(icon="chevron-left", tooltip="previous stage", layout=W.Layout(width="36px"))
        self.next = W.Button(icon="chevron-right", tooltip="next stage", layout=W.Layout(width="36px"))
        self.previous.on_click(lambda _: self.step(-1))
        self.next.on_click(lambda _: self.step(+1))
        self.group = W.Dropdown(options=self._groups(first.stage_id), description="envelope of",
                                style={"description_width": "80px"}, layout=W.Layout(width="300px"))
        self.group.add_class("sb-group-choice")
        self.group.observe(lambda ch: None if self.guard.active else self.show_group(ch["new"]), "value")
        self.cohesion = W.Checkbox(value=controller.interpretation.settings.fit.through_origin, indent=False,
                                   description="c' = 0 (through the origin)", layout=W.Layout(width="auto"))
        self.curved = W.Checkbox(value=False, indent=False, description="curved envelope tau = a sigma'^b",
                                 layout=W.Layout(width="auto"))
        self.cohesion.observe(self.on_cohesion, "value")
        self.curved.observe(self.on_curved, "value")
        chooser = W.HBox([self.previous, self.choice, self.next, self.group, self.cohesion, self.curved],
                         layout=W.Layout(flex_flow="row wrap", align_items="center", grid_gap="0 6px"))
        chooser.add_class("sb-chooser")
        self.stage_table = StageTable(self)
        self.table = self.stage_table.widget
        self.parameters = W.HTML()
        self.parameters.add_class("sb-parameters")
        self.notices = W.HTML()
        self.notices.add_class("sb-notices")
        self.fits = W.VBox([self.notices, self.parameters], layout=W.Layout(flex="1 1 420px", min_width="0"))
        self.fits.add_class("sb-fits")
        self.summary = W.HTML()
        self.summary.add_class("sb-summary")
        self.last_changes: list[str] = []
        self._previous: Results | None = None
        self.signoff = SignOffPanel(self)
        self.record_part = RecordPart(lambda: (self.controller.results, self.controller.interpretation))
        summary_box = W.VBox([W.HTML("<b>Summary</b>"), self.summary], layout=W.Layout(flex="1 1 420px", min_width="0"))
        summary_box.add_class("sb-summary-box")
        signoff_box = W.VBox([W.HTML("<b>Sign-off</b>"), self.signoff.widget],
                             layout=W.Layout(flex="1 1 420px", min_width="0"))
        signoff_box.add_class("sb-signoff-box")
        work = W.HBox([self.panel.controls, self.fits], layout=W.Layout(flex_flow="row wrap", grid_gap="0 16px",
                                                                        width="100%"))
        self.screen = W.VBox([
            W.HTML(LIVE_STYLE), self.top, chooser, self.bokeh, work,
            W.HTML("<b>Stages</b> <small>(click a stage to interpret it; a reason is required to exclude one)</small>"),
            self.table,
            W.HBox([summary_box, signoff_box],
                   layout=W.Layout(flex_flow="row wrap", grid_gap="0 16px", width="100%")),
            self.record_part.widget,
        ], layout=W.Layout(width="100%", overflow="hidden"))
        self.screen.add_class("sb-screen")
        self._plotted: Results | None = None  # the results the plots show
        controller.show_before_save(self.show_plots)
        controller.subscribe(self.refresh)
        self.refresh(results, frozenset())
        self.ready_state.value = f'<span class="sb-starting">{tables.esc(STARTING)}</span>'
        self.status.value = f"<small>Decisions are saved at once to {tables.esc(controller.path.name)}.</small>"

    # --- choosing what to look at ----------------------------------------------------------------

    def _groups(self, stage_id: str) -> list[str]:
        """The envelope groups the stage belongs to: its test set first, then its stratum pooled."""
        s = self.controller.stage(stage_id)
        return list(dict.fromkeys(e.group for e in self.controller.results.envelopes if s.in_group(e.group)))

    def _choices(self, results: Results) -> list[tuple[str, str]]:
        u = self.u
        return [(f"{s.stage_id}{f' ({s.test_set})' if s.test_set else ''}, sigma'n "
                 f"{u.with_unit('stress', s.sigma_nominal_kpa, 0)}{'' if s.included else ' - excluded'}", s.stage_id)
                for s in results.stages]

    def select(self, stage_id: str) -> StagePanel:
        """Interpret ``stage_id``: its curves and picks on the screen, the envelope of one of its groups beside."""
        if stage_id not in self.controller.stage_ids:
            raise KeyError(f"no stage {stage_id!r} in this project")
        with self.bokeh.batch():
            return self._select(stage_id)

    def _select(self, stage_id: str) -> StagePanel:
        s = self.controller.stage(stage_id)
        self.panel.show(s)
        groups = self._groups(stage_id)
        group = self.envelope_plot.group if self.envelope_plot.group in groups else groups[0]

        def write() -> None:
            self.choice.value = stage_id
            self.group.options = groups
            self.group.value = group
        self.guard.run(write)
        self.envelope_plot.show(self.controller.results, group)
        self.live_plots.record_state(s, self.controller.results)
        self.stage_table.mark_shown(stage_id)
        return self.panel

    def step(self, by: int) -> None:
        ids = self.controller.stage_ids
        self.select(ids[(ids.index(self.panel.sid) + by) % len(ids)])

    def show_group(self, group: str) -> None:
        with self.bokeh.batch():
            self.envelope_plot.show(self.controller.results, group)
            self.live_plots.record_state(self.controller.stage(self.panel.sid), self.controller.results)

    def ready(self) -> None:
        """Say the screen is ready (the last cell of the workbook calls it) and bring it into view."""
        self.is_ready = True
        self.ready_state.value = f'<span class="sb-ready">{tables.esc(READY)}</span>'
        from IPython.display import Javascript, display

        display(Javascript("const s = document.querySelector('.sb-screen');\n"
                           "if (s) s.scrollIntoView({block: 'start'});"))

    # --- edits -------------------------------------------------------------------------------------

    def act(self, edit: Callable[[Controller], bool], redraw: bool = False) -> bool:
        """Run one controller edit; show its message; snap a dragged marker back when nothing changed.

        The plots' changes go to the page as one patch (:class:`BatchedBokehModel`).
        """
        with self.bokeh.batch():
            return self._act(edit, redraw)

    def _act(self, edit: Callable[[Controller], bool], redraw: bool) -> bool:
        ok = edit(self.controller)
        c = self.controller
        if ok:
            changes = "".join(f'<br><span class="sb-flag">{tables.esc(self.u.annotate(x))}</span>'
                              for x in self.last_changes)
            self.status.value = (f'<span class="sb-saved">saved {utc_now()} by {tables.esc(c.author)} '
                                 f'({c.last_refresh_s * 1000:.0f} ms): {tables.esc(self.u.annotate(c.message))}</span>'
                                 + changes)
        elif c.message:
            self.status.value = f'<span class="sb-flag">{tables.esc(self.u.annotate(c.message))}</span>'
        self.last_message, c.message = c.message, ""
        if not ok and redraw:  # the marker goes back where the kernel has it (which also clears the preview)
            self.panel.update(c.stage(self.panel.sid))
        return ok

    def on_reload(self) -> None:
        """Read the file again (another writer saved it); not a save, so said as information."""
        c = self.controller
        with self.bokeh.batch():
            ok = c.reload()
        css = "sb-info" if ok else "sb-flag"
        self.status.value = f'<span class="{css}">{tables.esc(c.message)}</span>'
        self.last_message, c.message = c.message, ""

    def on_author(self, change: dict[str, Any]) -> None:
        self.controller.author = change["new"].strip()

    def on_cohesion(self, change: dict[str, Any]) -> None:
        if self.guard.active:
            return
        chosen = Cohesion.ORIGIN if change["new"] else Cohesion.FREE
        if not self.act(lambda c: c.set_cohesion(chosen)):  # refused: show the file's
            zero = self.controller.interpretation.settings.fit.through_origin
            self.guard.run(lambda: setattr(self.cohesion, "value", zero))

    def on_curved(self, change: dict[str, Any]) -> None:
        self.envelope_plot.curved = bool(change["new"])
        with self.bokeh.batch():
            self.envelope_plot.update(self.controller.results)

    def show_plots(self, results: Results, changed: frozenset[str]) -> None:
        """The envelope's new numbers first, then the stage's plots: sent to the page at once.

        The controller calls this before it saves an edit (and again when the save is refused), so the
        refit reaches the page while the file is written.
        """
        shown = results.stage(self.panel.sid)

        def draw() -> None:  # our own writes: the drag callbacks they trigger do nothing
            self.envelope_plot.update(results)
            self.live_plots.record_state(shown, results)
            if self.panel.sid in changed:
                self.panel.update(shown)
        self.guard.run(draw)
        self.bokeh.flush()
        self._plotted = results

    def refresh(self, results: Results, changed: frozenset[str]) -> None:
        plotted = self._plotted
        if plotted is None or any(getattr(results, f.name) is not getattr(plotted, f.name)
                                  for f in dataclasses.fields(results) if f.name != "provenance"):
            self.show_plots(results, changed)  # not shown before the save (a reload, the first view)
        self.stage_table.update(results)  # flags comparing stages may change on other rows
        zero = self.controller.interpretation.settings.fit.through_origin
        choices = self._choices(results)

        def write() -> None:
            self.cohesion.value = zero
            if list(self.choice.options) != choices:
                self.choice.options = choices
                self.choice.value = self.panel.sid
        self.guard.run(write)
        self.parameters.value = parameters_html(results, self.u)
        self.summary.value = summary_html(results, self.controller, self.u)
        self.last_changes = fit_changes(self._previous, results) if self._previous is not None else []
        self._previous = results
        self.notices.value = notices_html(self.last_changes, standing_notices(results), self.u)
        self.signoff.update()
        self.record_part.mark_stale(self.controller.interpretation.revision)


def notices_html(changes: list[str], standing: list[str], u: Display = SI) -> str:
    """Beside the envelopes: what the last edit changed in the fits, then what stands out in them now."""
    out = ""
    if changes:
        out += ("<p><b>The last edit changed the fits:</b></p><ul>"
                + "".join(f'<li class="sb-flag">{tables.esc(u.annotate(x))}</li>' for x in changes) + "</ul>")
    if standing:
        out += ("<p><b>To judge in these fits:</b></p><ul>"
                + "".join(f"<li>{tables.esc(u.annotate(x))}</li>" for x in standing) + "</ul>")
    return out


NEXT_STEPS = {"draft": ("checked",), "checked": ("approved", "draft"), "approved": ("draft",)}


class SignOffPanel:
    """The sign-off where the work is: its state and history, and the next step recorded by the author."""

    def __init__(self, wb: LiveWorkbook) -> None:
        self.wb = wb
        self.history = W.HTML()
        self.history.add_class("sb-signoff-history")
        self.state = W.Dropdown(description="next step", options=[], style={"description_width": "80px"},
                                layout=W.Layout(width="220px"))
        self.state.add_class("sb-signoff-state")
        self.note = W.Text(placeholder="remark (optional)", layout=W.Layout(width="260px"))
        self.note.add_class("sb-signoff-note")
        self.button = W.Button(description="record this step", icon="check", layout=W.Layout(width="170px"))
        self.button.add_class("sb-signoff-record")
        self.button.on_click(lambda _: self.record())
        hint = W.HTML("<small>Recorded with your name and the time, like every decision. To sign a step with your "
                      "OpenSSH key, use <code>shearbook signoff --sign KEY --principal EMAIL</code>.</small>")
        self.widget = W.VBox([self.history, W.HBox([self.state, self.note, self.button],
                                                   layout=W.Layout(flex_flow="row wrap", grid_gap="4px 6px")), hint],
                             layout=W.Layout(min_width="0"))
        self.update()

    def update(self) -> None:
        so = self.wb.controller.interpretation.signoff
        self.history.value = tables.signoff_table(so)
        options = NEXT_STEPS[so.state]
        self.wb.guard.run(lambda: setattr(self.state, "options", list(options)))
        self.wb.guard.run(lambda: setattr(self.state, "value", options[0]))

    def record(self) -> None:
        if self.wb.act(lambda c: c.sign_off(self.state.value, self.note.value.strip())):
            self.note.value = ""
        self.update()


def parameters_html(results: Results, u: Display = SI) -> str:
    """c' and phi' with their intervals, every group and envelope; the caution below."""
    rows = []
    for e in results.envelopes:
        fit = e.chosen
        kind = e.kind.replace("_", " ")
        if fit is None:
            rows.append((tables.esc(e.group), tables.esc(kind), str(len(e.stage_ids)), "&ndash;", "&ndash;",
                         tables.esc(e.not_fitted or "")))
            continue
        lo, hi = fit.phi_interval_deg
        c_lo, c_hi = fit.c_interval_kpa
        c = "0 (fixed)" if fit.through_origin else (
            f"{u.fmt('stress', fit.intercept, 1)} [{u.fmt('stress', c_lo, 1)}, {u.fmt('stress', c_hi, 1)}]")
        phi = (f'<span class="sb-phi" data-group="{tables.esc(e.group)}" data-kind="{tables.esc(e.kind)}">'
               f"{fit.phi_deg:.1f}</span> [{lo:.1f}, {hi:.1f}]")
        rows.append((tables.esc(e.group), tables.esc(kind), str(fit.n), phi, c, tables.esc(e.not_fitted or "")))
    level = next((e.chosen.level for e in results.envelopes if e.chosen), 0.95)
    ci = f"[{level * 100:g} % CI]"
    head = ("group", "envelope", "n", f"phi' (deg) {ci}", f"c' ({u.unit('stress')}) {ci}", "remarks")
    return _NOWRAP + tables.table(head, rows, css="sb-table sb-live") + tables.caution_html()


_NOWRAP = "<style>.sb-live td:nth-child(4), .sb-live td:nth-child(5) {white-space: nowrap;}</style>"  # the numbers


def summary_html(results: Results, controller: Controller, u: Display = SI) -> str:
    """Chosen parameters, the flags still open and the sign-off state, in a few lines."""
    interp = controller.interpretation
    manual = sum(p is not None and p.source == "manual" for s in results.stages
                 for p in (s.peak, s.critical_state, s.residual))
    out = [s for s in results.stages if not s.included]
    params = "; ".join(
        f"{e.group} {e.kind.replace('_', ' ')}: phi' {e.chosen.phi_deg:.1f} deg, "
        f"c' {u.with_unit('stress', e.chosen.intercept, 1)}"
        for e in results.envelopes if e.chosen)
    flags = [(s.stage_id, f) for s in results.stages if s.included for f in s.flags]
    flag_items = "".join(f"<li>{tables.esc(sid)}: {tables.esc(u.annotate(f))}</li>" for sid, f in flags) or (
        "<li>none</li>")
    signed = interp.signoff.history[-1] if interp.signoff.history else None
    who = f" ({tables.esc(signed['who'])}, {tables.esc(signed['time_utc'])})" if signed else ""
    return (f"<p><b>Parameters:</b> {tables.esc(params) or 'none fitted'}.</p>"
            f"<p><b>Decisions:</b> {manual} manual pick(s), {len(out)} stage(s) excluded"
            + "".join(f"; {tables.esc(s.stage_id)}: {tables.esc(s.exclusion_reason)}" for s in out)
            + f". File: {tables.esc(str(controller.path))}.</p>"
            f"<p><b>Open flags on included stages ({len(flags)}):</b></p><ul>{flag_items}</ul>"
            f"<p><b>Sign-off:</b> {tables.esc(interp.signoff.state)}{who}.</p>" + tables.caution_html())


def live_workbook(project_dir: str | Path, interpretation_file: str | Path | None = None,
                  author: str = "", units: str | None = None) -> LiveWorkbook:
    """Open the live screen on a project: every decision already in the interpretation file is restored.

    ``units``: "SI" or "US" for what is shown and typed (None: the project's [display] units).
    """
    controller = Controller(project_dir, interpretation_file, author)
    return LiveWorkbook(controller, display_for(units or controller.project.display_units, "display units"))
