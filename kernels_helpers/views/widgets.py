"""The live workbook's screen: Bokeh plots and ipywidgets wired to one :class:`Controller`.

Widgets never compute: every callback calls one controller edit (which goes through the
Interpretation's edit methods and the pipeline) and then shows what the controller reports. The
Bokeh callbacks guard against jupyter_bokeh's echo of our own writes and its double calls: they
return early when the incoming data is what the current pick already draws.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from pathlib import Path
from typing import Any

import ipywidgets as W
from bokeh.layouts import column, row
from jupyter_bokeh.widgets import BokehModel

from ..display_units import SI, Display, display_for
from ..escaping import dom_key
from ..interpretation import utc_now
from ..notices import fit_changes, standing_notices
from ..results import Results, StageResult
from . import tables
from .interactive import Controller
from .live_plots import EnvelopePlot, StagePlots, marker_data, residual_data, window_data

__all__ = ["LiveWorkbook", "live_workbook"]

PICK_HELP = ("Drag the amber diamond (peak) or the teal squares (ends of the critical-state window) on the shear "
             "stress plot; they snap to the nearest reading. Or type the displacement below.")


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
    """Plots, number twins and "back to suggestion" buttons of one stage."""

    def __init__(self, wb: LiveWorkbook, s: StageResult) -> None:
        self.wb, self.sid, u = wb, s.stage_id, wb.u
        pick = wb.controller.residual_pick(self.sid)  # None unless a reversal test
        self.plots = StagePlots(s, self.on_peak_drag, self.on_window_drag, pick, self.on_residual_drag, u)
        self.peak_x = _float_text("peak at x", s.peak.x_mm, f"sb-peak-x-{dom_key(self.sid)}", u)
        self.cs_from = _float_text("window from", s.cs.x_from_mm, f"sb-cs-from-{dom_key(self.sid)}", u)
        self.cs_to = _float_text("window to", s.cs.x_to_mm, f"sb-cs-to-{dom_key(self.sid)}", u)
        d = wb.controller.interpretation.decision(self.sid)
        known = d.peak.note or d.critical_state.note
        wb.controller.reasons[self.sid] = known
        required = wb.controller.project.manual_pick_reason == "require"
        self.reason = W.Text(value=known, continuous_update=False, layout=W.Layout(width="265px"),
                             placeholder="reason for a manual pick" + (" (required)" if required else ""))
        self.reason.add_class(f"sb-pick-reason-{dom_key(self.sid)}")
        self.reason.observe(lambda ch: None if self.wb.guard.active else self.wb.act(
            lambda c: c.set_pick_reason(self.sid, ch["new"])), "value")
        self.peak_reset = W.Button(description="peak: back to suggestion", layout=W.Layout(width="260px"))
        self.cs_reset = W.Button(description="window: back to suggestion", layout=W.Layout(width="260px"))
        self.info = W.HTML()
        self.peak_x.observe(self.on_peak_typed, "value")
        self.cs_from.observe(self.on_window_typed, "value")
        self.cs_to.observe(self.on_window_typed, "value")
        self.peak_reset.on_click(lambda _: self.wb.act(lambda c: c.back_to_suggestion(self.sid, "peak")))
        self.cs_reset.on_click(lambda _: self.wb.act(lambda c: c.back_to_suggestion(self.sid, "critical_state")))
        residual: list[W.Widget] = []
        self.residual_pass: W.Dropdown | None = None
        if pick is not None:  # reversal tests: the residual window on one forward pass
            forward = [p.pass_no for p in s.passes if p.forward]
            self.residual_pass = W.Dropdown(options=[(f"pass {n}", n) for n in forward], value=pick[0],
                                            description="forward pass", style={"description_width": "125px"},
                                            layout=W.Layout(width="265px"))
            self.residual_pass.add_class(f"sb-res-pass-{dom_key(self.sid)}")
            self.res_from = _float_text("residual from", pick[1], f"sb-res-from-{dom_key(self.sid)}", u)
            self.res_to = _float_text("residual to", pick[2], f"sb-res-to-{dom_key(self.sid)}", u)
            self.res_reset = W.Button(description="residual: back to suggestion", layout=W.Layout(width="260px"))
            for w in (self.residual_pass, self.res_from, self.res_to):
                w.observe(self.on_residual_typed, "value")
            self.res_reset.on_click(lambda _: self.wb.act(lambda c: c.back_to_suggestion(self.sid, "residual")))
            residual = [W.HTML("<small>residual window (mean |tau| over it)</small>"), self.residual_pass,
                        self.res_from, self.res_to, self.res_reset]
        side = W.VBox([W.HTML(f"<b>{tables.esc(self.sid)}</b>: type a displacement and press Enter"), self.reason,
                       self.peak_x,
                       self.peak_reset, W.HTML("<small>critical-state window</small>"), self.cs_from, self.cs_to,
                       self.cs_reset, *residual, self.info], layout=W.Layout(width="280px"))
        self.widget = W.HBox([BokehModel(self.plots.layout), side])
        self.update(s)

    # Bokeh callbacks: (attr, old, new) as jupyter_bokeh calls them, twice, and with our own echo. The page
    # works in display units; the controller in mm (mm() turns a displayed displacement back into mm).
    def mm(self, shown: float) -> float:
        return self.wb.u.canonical("length", float(shown))

    def on_peak_drag(self, attr: str, old: Any, new: Any) -> None:
        if not new.get("x") or _same(new, marker_data(self.wb.controller.stage(self.sid), self.wb.u)):
            return  # our own write coming back, or the second call of one change
        self.wb.act(lambda c: c.move_peak(self.sid, self.mm(new["x"][0])), redraw=self.sid)

    def on_window_drag(self, attr: str, old: Any, new: Any) -> None:
        xs = list(new.get("x", []))
        if len(xs) != 2 or _same(new, window_data(self.wb.controller.stage(self.sid), self.wb.u)):
            return
        self.wb.act(lambda c: c.set_window(self.sid, self.mm(min(xs)), self.mm(max(xs))), redraw=self.sid)

    def on_peak_typed(self, change: dict[str, Any]) -> None:
        if not self.wb.guard.active:
            self.wb.act(lambda c: c.move_peak(self.sid, self.mm(change["new"])), redraw=self.sid)

    def on_window_typed(self, change: dict[str, Any]) -> None:
        if not self.wb.guard.active:
            self.wb.act(lambda c: c.set_window(self.sid, self.mm(self.cs_from.value), self.mm(self.cs_to.value)),
                        redraw=self.sid)

    def on_residual_drag(self, attr: str, old: Any, new: Any) -> None:
        xs = list(new.get("x", []))
        c = self.wb.controller
        pick = c.residual_pick(self.sid)
        if len(xs) != 2 or pick is None or _same(new, residual_data(c.stage(self.sid), pick, self.wb.u)):
            return  # our own write coming back, or the second call of one change
        self.wb.act(lambda c: c.set_residual(self.sid, pick[0], self.mm(min(xs)), self.mm(max(xs))),
                    redraw=self.sid)

    def on_residual_typed(self, change: dict[str, Any]) -> None:
        if not self.wb.guard.active and self.residual_pass is not None:
            self.wb.act(lambda c: c.set_residual(self.sid, self.residual_pass.value, self.mm(self.res_from.value),
                                                 self.mm(self.res_to.value)), redraw=self.sid)

    def update(self, s: StageResult) -> None:
        pick = self.wb.controller.residual_pick(self.sid)
        self.plots.update(s, pick)

        u = self.wb.u

        def write() -> None:
            self.peak_x.value = _shown_mm(u, s.peak.x_mm)
            self.cs_from.value = _shown_mm(u, s.cs.x_from_mm)
            self.cs_to.value = _shown_mm(u, s.cs.x_to_mm)
            if self.residual_pass is not None and pick is not None:
                self.residual_pass.value = pick[0]
                self.res_from.value = _shown_mm(u, pick[1])
                self.res_to.value = _shown_mm(u, pick[2])
        self.wb.guard.run(write)
        peak = "suggested" if s.peak_source == "suggested" else (
            f"manual (suggested {u.with_unit('length', s.peak_suggested.x_mm, 2)})")
        cs = "suggested" if s.cs_source == "suggested" else (
            f"manual (suggested {u.fmt('length', s.cs_suggested.x_from_mm, 2)}-"
            f"{u.with_unit('length', s.cs_suggested.x_to_mm, 2)})")
        distinct = f"<br><i>{tables.esc(u.annotate(s.no_distinct_peak))}</i>" if s.no_distinct_peak else ""
        residual = "" if pick is None else f"<br>residual: {tables.esc(residual_words(s, pick, u))}"
        self.info.value = (f"<small>peak: {tables.esc(peak)}, tau {u.with_unit('stress', s.peak.tau_kpa, 1)}"
                           f"{distinct}<br>critical state: {tables.esc(cs)}, tau "
                           f"{u.with_unit('stress', s.cs.tau_kpa, 1)}{residual}</small>" + stage_flags_html(s, u))


def stage_flags_html(s: StageResult, u: Display = SI) -> str:
    """Every flag of a stage, listed in full beside its plots (the table shows them folded)."""
    if not s.flags:
        return '<div class="sb-stage-flags"><small>no flags on this stage</small></div>'
    items = "".join(f"<li>{tables.esc(u.annotate(f))}</li>" for f in s.flags)
    return (f'<div class="sb-stage-flags"><b class="sb-flag">{len(s.flags)} flag(s) on this stage:</b>'
            f'<ul style="font-size: 11px; margin: 2px 0; padding-left: 14px">{items}</ul></div>')


def residual_words(s: StageResult, pick: tuple[int, float, float], u: Display = SI) -> str:
    """The residual in use, in words: value, pass, window and source (e.g. for the stage table)."""
    r = s.residual
    if r is None or r.tau_kpa is None:
        value = "not reached"
    else:
        bound = "" if r.reached else " (not reached: an upper bound)"
        value = f"{u.with_unit('stress', r.tau_kpa, 1)}{bound}"
    return (f"{value} on pass {pick[0]}, {u.fmt('length', pick[1], 2)}-{u.with_unit('length', pick[2], 2)} "
            f"({s.residual_source})")


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
        cells: list[W.Widget] = [W.HTML(f"<b>{tables.esc(h)}</b>") for h in head]
        for sid in wb.controller.stage_ids:
            r = {"sigma": W.HTML(), "peak": W.HTML(), "cs": W.HTML(), "residual": W.HTML(), "flags": W.HTML(),
                 "include": W.Checkbox(description="", indent=False),
                 "reason": W.Text(placeholder="required to exclude", continuous_update=False),
                 "note": W.Text(placeholder="note", continuous_update=False)}
            for key in ("include", "reason", "note"):
                r[key].add_class(f"sb-{key}-{dom_key(sid)}")
            r["include"].observe(lambda ch, sid=sid: self.on_include(sid, ch["new"]), "value")
            r["reason"].observe(lambda ch, sid=sid: self.on_reason(sid, ch["new"]), "value")
            r["note"].observe(lambda ch, sid=sid: self.on_note(sid, ch["new"]), "value")
            self.rows[sid] = r
            for key in ("reason", "note"):
                r[key].layout = W.Layout(width="210px")
            r["residual"].add_class(f"sb-residual-{dom_key(sid)}")
            cells += [W.HTML(f"<b>{tables.esc(sid)}</b>"), r["sigma"], r["peak"], r["cs"],
                      *([r["residual"]] if self.reversal else []), r["flags"], r["include"],
                      W.VBox([r["reason"], r["note"]])]
        self.message = W.HTML()
        self.message.add_class("sb-table-message")
        columns = "70px 60px 130px 150px " + ("170px " if self.reversal else "") + "minmax(160px, 1fr) 60px 215px"
        grid = W.GridBox(cells, layout=W.Layout(grid_template_columns=columns,
                                                grid_gap="2px 8px", align_items="center"))
        self.widget = W.VBox([grid, self.message])
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
                no_peak = s.no_distinct_peak and s.peak_source == "suggested"
                peak = "no distinct peak" if no_peak else u.fmt("stress", s.peak.tau_kpa, 1)
                r["peak"].value = f"{tables.esc(peak)} at {u.with_unit('length', s.peak.x_mm, 2)} ({s.peak_source})"
                r["cs"].value = (f"{u.fmt('stress', s.cs.tau_kpa, 1)} over {u.fmt('length', s.cs.x_from_mm, 2)}-"
                                 f"{u.with_unit('length', s.cs.x_to_mm, 2)} ({s.cs_source})"
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


class LiveWorkbook:
    """The whole live screen; display its parts in separate cells (``top``, stages, ``table``...)."""

    def __init__(self, controller: Controller, u: Display = SI) -> None:
        self.controller = controller
        self.u = u  # display units: what the screen shows and what is typed; the controller keeps mm and kPa
        self.guard = _Guard()
        self.last_message = ""
        self.author = W.Text(value=controller.author, description="author", placeholder="your name (recorded)",
                             continuous_update=True)
        self.author.add_class("sb-author")
        self.author.observe(self.on_author, "value")
        self.undo = W.Button(description="undo last change", icon="undo", layout=W.Layout(width="180px"))
        self.undo.on_click(lambda _: self.act(lambda c: c.undo()))
        self.reload = W.Button(description="reload from file", icon="refresh", layout=W.Layout(width="180px"),
                               tooltip="read the interpretation file again (another writer saved it)")
        self.reload.on_click(lambda _: self.on_reload())
        self.status = W.HTML()
        self.status.add_class("sb-status")
        self.top = W.VBox([W.HBox([self.author, self.undo, self.reload]), self.status])
        self.panels = {s.stage_id: StagePanel(self, s) for s in controller.results.stages}
        self.stage_table = StageTable(self)
        self.table = self.stage_table.widget
        groups = dict.fromkeys(e.group for e in controller.results.envelopes)
        self.envelope_plots = [EnvelopePlot(controller.results, g, u) for g in groups]
        self.cohesion = W.Checkbox(value=controller.interpretation.settings.fit.cohesion == "zero", indent=False,
                                   description="c' = 0 (envelopes through the origin)")
        self.curved = W.Checkbox(value=False, indent=False, description="show the curved envelope tau = a sigma'^b")
        self.cohesion.observe(self.on_cohesion, "value")
        self.curved.observe(self.on_curved, "value")
        self.parameters = W.HTML()
        self.parameters.add_class("sb-parameters")
        self.envelopes = W.VBox([W.HBox([self.cohesion, self.curved]),
                                 BokehModel(_pairs([e.figure for e in self.envelope_plots])), self.parameters])
        self.summary = W.HTML()
        self.summary.add_class("sb-summary")
        self.notices = W.HTML()
        self.notices.add_class("sb-notices")
        self.last_changes: list[str] = []
        self._previous: Results | None = None
        self.envelopes.children = (*self.envelopes.children, self.notices)
        self.signoff = SignOffPanel(self)
        controller.subscribe(self.refresh)
        self.refresh(controller.results, frozenset())
        self.status.value = (f"<small>{tables.esc(PICK_HELP)} Decisions are saved at once to "
                             f"{tables.esc(controller.path.name)}.</small>")

    def stage_panel(self, stage_id: str) -> W.Widget:
        return self.panels[stage_id].widget

    @property
    def stages(self) -> W.Widget:
        return W.VBox([p.widget for p in self.panels.values()])

    def act(self, edit: Callable[[Controller], bool], redraw: str | None = None) -> bool:
        """Run one controller edit; show its message; snap a dragged marker back when nothing changed."""
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
        if not ok and redraw:
            self.panels[redraw].update(c.stage(redraw))
        return ok

    def on_reload(self) -> None:
        """Read the file again (another writer saved it); not a save, so said as information."""
        c = self.controller
        ok = c.reload()
        css = "sb-info" if ok else "sb-flag"
        self.status.value = f'<span class="{css}">{tables.esc(c.message)}</span>'
        self.last_message, c.message = c.message, ""

    def on_author(self, change: dict[str, Any]) -> None:
        self.controller.author = change["new"].strip()

    def on_cohesion(self, change: dict[str, Any]) -> None:
        if self.guard.active:
            return
        if not self.act(lambda c: c.set_cohesion("zero" if change["new"] else "free")):  # refused: show the file's
            zero = self.controller.interpretation.settings.fit.cohesion == "zero"
            self.guard.run(lambda: setattr(self.cohesion, "value", zero))

    def on_curved(self, change: dict[str, Any]) -> None:
        for e in self.envelope_plots:
            e.curved = bool(change["new"])
            e.update(self.controller.results)

    def refresh(self, results: Results, changed: frozenset[str]) -> None:
        for sid in changed:
            self.panels[sid].update(results.stage(sid))
        self.stage_table.update(results)  # flags comparing stages may change on other rows
        for e in self.envelope_plots:
            e.update(results)
        zero = self.controller.interpretation.settings.fit.cohesion == "zero"
        self.guard.run(lambda: setattr(self.cohesion, "value", zero))
        self.parameters.value = parameters_html(results, self.u)
        self.summary.value = summary_html(results, self.controller, self.u)
        self.last_changes = fit_changes(self._previous, results) if self._previous is not None else []
        self._previous = results
        self.notices.value = notices_html(self.last_changes, standing_notices(results), self.u)
        if hasattr(self, "signoff"):
            self.signoff.update()


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
        self.widget = W.VBox([self.history, W.HBox([self.state, self.note, self.button]), hint])
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


def _pairs(figures: list[Any]) -> Any:
    """Figures two to a row."""
    return column(*(row(*figures[i : i + 2]) for i in range(0, len(figures), 2)))


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


_NOWRAP = "<style>.sb-live td:not(:last-child), .sb-live th {white-space: nowrap;}</style>"


def summary_html(results: Results, controller: Controller, u: Display = SI) -> str:
    """Chosen parameters, the flags still open and the sign-off state, in a few lines."""
    interp = controller.interpretation
    manual = sum((s.peak_source == "manual") + (s.cs_source == "manual") + (s.residual_source == "manual")
                 for s in results.stages)
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
