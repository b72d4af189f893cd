"""Bokeh figures of the live workbook, with the sources the controller pushes new data into.

A stage panel shows four plots sharing the horizontal-displacement axis: shear stress, vertical
displacement, stress ratio and rate of dilation. The peak marker and the two ends of the
critical-state window are one-point / two-point sources edited by a ``PointDrawTool``; whatever the
browser sends, the marker is snapped back onto the readings by the controller. Curves are decimated
for display only (:func:`~kernels_helpers.views.figures.decimate`).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from bokeh.layouts import column, row
from bokeh.models import (
    BoxAnnotation,
    ColumnDataSource,
    HoverTool,
    Label,
    LabelSet,
    Legend,
    LegendItem,
    PointDrawTool,
    Span,
)
from bokeh.plotting import figure

from ..display_units import SI, Display
from ..envelope import confidence_band, fit_power_law
from ..results import EnvelopeResult, Results, StageResult
from .figures import CRIT, GREY, INK, PEAK, RESIDUAL, SUGGESTED, decimate

__all__ = ["EnvelopePlot", "StagePlots", "marker_data", "residual_data", "window_data"]

TOOLS = "pan,box_zoom,wheel_zoom,reset,save"
# source column, axis label (its unit from the display units), title, quantity for the display units
CURVES = (("tau_kpa", "shear stress tau", "shear stress", "stress"),
          ("y_mm", "vertical displacement y", "vertical displacement (dilation +)", "length"),
          ("ratio", "stress ratio tau/sigma' (-)", "stress ratio", None),
          ("dydx", "rate of dilation dy/dx (-)", "rate of dilation", None))
QUANTITY = {"x_mm": "length", "tau_kpa": "stress", "y_mm": "length", "abs_tau": "stress"}  # columns with a unit
Callback = Callable[[str, Any, Any], None]
ResidualPick = tuple[int, float, float]  # reversal tests: pass number, window from and to (mm)


def _xy(u: Display, xs: list[float], ys: list[float]) -> dict[str, list[float]]:
    """Points (canonical mm, kPa) in display units: what the page draws and sends back."""
    return {"x": [u.value("length", x) for x in xs], "y": [u.value("stress", y) for y in ys]}


def marker_data(s: StageResult, u: Display = SI) -> dict[str, list[float]]:
    """The peak marker: the chosen peak reading (x, smoothed tau), in display units."""
    return _xy(u, [s.peak.x_mm], [s.peak.tau_kpa])


def window_data(s: StageResult, u: Display = SI) -> dict[str, list[float]]:
    """The two ends of the critical-state window, drawn at the window's mean shear stress (display units)."""
    return _xy(u, [s.cs.x_from_mm, s.cs.x_to_mm], [s.cs.tau_kpa, s.cs.tau_kpa])


def residual_data(s: StageResult, pick: ResidualPick, u: Display = SI) -> dict[str, list[float]]:
    """The two ends of the residual window, at the residual shear stress (mean |tau| over the window)."""
    _, lo, hi = pick
    tau = s.residual.tau_kpa if s.residual is not None and s.residual.tau_kpa is not None else _window_mean(s, pick)
    return _xy(u, [lo, hi], [tau, tau])


def _flagged_data(s: StageResult, u: Display = SI) -> dict[str, list]:
    """The shearing readings a check flagged (spikes), at their place on the shear-stress curve."""
    c = s.reduced.curve
    sel = c[c["in_shear"].to_numpy() & c["spike"].to_numpy()]
    xs, ys = sel["x_mm"].tolist(), sel["tau_kpa"].tolist()
    return {**_xy(u, xs, ys), "text": ["isolated spike (Hampel filter): kept as read, left out of the smoothing "
                                       "and the suggestions"] * len(xs)}


def _scaled(data: dict[str, np.ndarray], u: Display) -> dict[str, np.ndarray]:
    return {k: v * u.factor(QUANTITY[k]) if k in QUANTITY else v for k, v in data.items()}  # type: ignore[arg-type]


def _pass_rows(s: StageResult, pass_no: int) -> tuple[np.ndarray, np.ndarray]:
    """Displacement and |tau| of the shearing readings of one pass (reverse passes carry negative tau)."""
    c = s.reduced.curve
    sel = c[c["in_shear"].to_numpy() & (c["pass_no"].to_numpy() == pass_no)]
    return sel["x_mm"].to_numpy(), np.abs(sel["tau_kpa"].to_numpy())


def _window_mean(s: StageResult, pick: ResidualPick) -> float:
    x, tau = _pass_rows(s, pick[0])
    inside = (x >= pick[1]) & (x <= pick[2])
    return float(np.mean(tau[inside])) if inside.any() else 0.0


def _pass_curve(s: StageResult, pass_no: int) -> dict[str, np.ndarray]:
    x, tau = _pass_rows(s, pass_no)
    keep = decimate(x, [tau])
    return {"x_mm": x[keep], "abs_tau": tau[keep]}


def _curve_data(s: StageResult) -> dict[str, np.ndarray]:
    c = s.reduced.curve
    shear = c[c["in_shear"].to_numpy() & (c["pass_no"].to_numpy() == 1)]
    keep = decimate(shear["x_mm"].to_numpy(), [shear[k].to_numpy() for k, _, _, _ in CURVES])
    d = shear.iloc[keep]
    return {k: d[k].to_numpy() for k in ("x_mm", "tau_kpa", "y_mm", "ratio", "dydx", "e")}


class StagePlots:
    """The four linked plots of one stage, the draggable picks, and how to redraw them."""

    def __init__(self, s: StageResult, on_peak: Callback, on_window: Callback,
                 residual: ResidualPick | None = None, on_residual: Callback | None = None, u: Display = SI) -> None:
        """``residual`` (reversal tests): the residual window in use; its ends are dragged like the window's.

        Everything is drawn in the display units ``u``; the callbacks receive display units (the
        widgets turn them back into mm before the controller sees them).
        """
        self.stage_id = s.stage_id
        self.u = u
        self.curve = ColumnDataSource(_scaled(_curve_data(s), u))
        self.peak = ColumnDataSource(marker_data(s, u))
        self.window = ColumnDataSource(window_data(s, u))
        self.peak_suggested = ColumnDataSource(_xy(u, [s.peak_suggested.x_mm], [s.peak_suggested.tau_kpa]))
        self.plots = [self._plot(i, key, label, title, q) for i, (key, label, title, q) in enumerate(CURVES)]
        k = u.factor("length")
        self.boxes = [BoxAnnotation(left=s.cs.x_from_mm * k, right=s.cs.x_to_mm * k, fill_color=CRIT,
                                    fill_alpha=0.13, level="underlay") for _ in self.plots]
        self.spans = [Span(location=s.peak.x_mm * k, dimension="height", line_color=PEAK, line_dash="dashed",
                           line_width=1.5) for _ in self.plots]
        for p, box, span in zip(self.plots, self.boxes, self.spans, strict=True):
            p.add_layout(box)
            p.add_layout(span)
        tau = self.plots[0]
        ghost = tau.scatter("x", "y", source=self.peak_suggested, size=13, marker="diamond", fill_color=None,
                            line_color=SUGGESTED, line_width=2)
        win = tau.scatter("x", "y", source=self.window, size=13, marker="square", fill_color=CRIT, line_color="white")
        # readings a check flagged, drawn where they are (hover for the flag): isolated spikes (Hampel filter)
        self.flagged = ColumnDataSource(_flagged_data(s, u))
        self._flagged_for = s.reduced  # spikes depend on the reduction only: redrawn when it changes, not per pick
        spikes = tau.scatter("x", "y", source=self.flagged, size=9, marker="x", line_color="#b3261e", line_width=2)
        tau.add_tools(HoverTool(renderers=[spikes], tooltips=[("flag", "@text"), ("x", "@x")]))
        mark = tau.scatter("x", "y", source=self.peak, size=15, marker="diamond", fill_color=PEAK, line_color="white")
        # which pick is which, in words on the plot (not only by the marker's fill)
        self.peak_label = Label(x=0.0, y=0.0, text="", text_font_size="10px", text_color=PEAK, x_offset=8, y_offset=6,
                                background_fill_color="white", background_fill_alpha=0.8)
        tau.add_layout(self.peak_label)
        draggable, items = [mark, win], [
            LegendItem(label="readings", renderers=[tau.renderers[0]]),
            LegendItem(label="suggested peak", renderers=[ghost]),
            LegendItem(label="peak (drag it)", renderers=[mark]),
            LegendItem(label="critical-state window ends (drag them)", renderers=[win]),
            LegendItem(label="flagged readings (hover)", renderers=[spikes]),
        ]
        self.residual: ColumnDataSource | None = None
        if residual is not None:
            draggable.append(self._residual_layers(s, residual, items))
        tool = PointDrawTool(renderers=draggable, add=False, drag=True,
                             description="drag the peak or the window ends" if residual is None else
                             "drag the peak, the critical-state window ends or the residual window ends")
        tau.add_tools(tool)
        tau.toolbar.active_tap = tool
        tau.add_layout(Legend(items=items, ncols=2, label_text_font_size="9px", spacing=0, padding=2, margin=2,
                              label_height=12, glyph_height=12), "below")
        tau.height = 250 if residual is None else 275
        self.peak.on_change("data", on_peak)
        self.window.on_change("data", on_window)
        if self.residual is not None and on_residual is not None:
            self.residual.on_change("data", on_residual)
        # one toolbar per plot (a merged toolbar would fight over which tap tool is active)
        self.layout = column(row(*self.plots[:2]), row(*self.plots[2:]))
        self.update(s, residual)

    def _residual_layers(self, s: StageResult, pick: ResidualPick, items: list[LegendItem]) -> Any:
        """On the shear-stress plot: |tau| of the residual pass, the shaded window, its two ends, the value."""
        tau = self.plots[0]
        self.residual_pass = pick[0]
        k = self.u.factor("length")
        self.residual_curve = ColumnDataSource(_scaled(_pass_curve(s, pick[0]), self.u))
        self.residual = ColumnDataSource(residual_data(s, pick, self.u))
        self.residual_box = BoxAnnotation(left=pick[1] * k, right=pick[2] * k, fill_color=RESIDUAL, fill_alpha=0.10,
                                          hatch_pattern="/", hatch_color=RESIDUAL, hatch_alpha=0.25, level="underlay")
        self.residual_label = Label(x=pick[2] * k, y=0.0, text="", text_font_size="10px", text_color=RESIDUAL,
                                    text_align="right", text_baseline="bottom", y_offset=9,
                                    background_fill_color="white", background_fill_alpha=0.8)
        tau.add_layout(self.residual_box)
        tau.add_layout(self.residual_label)
        line = tau.line("x_mm", "abs_tau", source=self.residual_curve, color=RESIDUAL, line_width=1.1, alpha=0.85)
        ends = tau.scatter("x", "y", source=self.residual, size=13, marker="square", fill_color=RESIDUAL,
                           line_color="white")
        items += [LegendItem(label="|tau| on the residual pass", renderers=[line]),
                  LegendItem(label="residual window ends (drag them)", renderers=[ends])]
        return ends

    def _plot(self, i: int, key: str, label: str, title: str, quantity: str | None):
        shared = {"x_range": self.plots_x_range} if i else {}
        u = self.u
        p = figure(height=210, width=360, tools=TOOLS, name=f"live-{self.stage_id}-{key.split('_')[0]}",
                   title=f"{self.stage_id} - {title}", x_axis_label=u.label("horizontal displacement", "length"),
                   y_axis_label=u.label(label, quantity) if quantity else label,  # type: ignore[arg-type]
                   **shared)
        if not i:
            self.plots_x_range = p.x_range
        p.toolbar.logo = None
        p.toolbar.autohide = True
        p.title.text_font_size = "11px"
        r = p.line("x_mm", key, source=self.curve, color=INK, line_width=1.3)
        lf, sf = ("0.000", "0.0") if u.is_si else ("0.0000", "0")
        L, S = u.unit("length"), u.unit("stress")
        p.add_tools(HoverTool(renderers=[r], mode="vline", tooltips=[
            ("x", f"@x_mm{{{lf}}} {L}"), ("tau", f"@tau_kpa{{{sf}}} {S}"), ("y", f"@y_mm{{+{lf}}} {L}"),
            ("tau/sigma'", "@ratio{0.000}"), ("dy/dx", "@dydx{+0.0000}"), ("e", "@e{0.0000}")]))
        return p

    def update(self, s: StageResult, residual: ResidualPick | None = None) -> None:
        """Redraw the picks (only what differs is sent to the page); ``residual``: the residual window in use."""
        colour = INK if s.included else GREY
        for p in self.plots:
            p.renderers[0].glyph.line_color = colour
            p.background_fill_color = "white" if s.included else "#f1f2f3"
        u, k = self.u, self.u.factor("length")
        for box in self.boxes:
            box.update(left=s.cs.x_from_mm * k, right=s.cs.x_to_mm * k)
        for span in self.spans:
            span.location = s.peak.x_mm * k
        _set(self.peak, marker_data(s, u))
        _set(self.window, window_data(s, u))
        if s.reduced is not self._flagged_for:
            self._flagged_for = s.reduced
            _set(self.flagged, _flagged_data(s, u))
        shown = marker_data(s, u)
        words = ("no distinct peak" if s.no_distinct_peak and s.peak_source == "suggested"
                 else "manual peak" if s.peak_source == "manual" else "suggested peak")
        self.peak_label.update(x=shown["x"][0], y=shown["y"][0], text=words)
        _set(self.peak_suggested, _xy(u, [s.peak_suggested.x_mm], [s.peak_suggested.tau_kpa]))
        in_set = f" ({s.test_set})" if s.test_set else ""
        self.plots[0].title.text = (f"{s.stage_id}{in_set} - shear stress, sigma'n "
                                    f"{u.with_unit('stress', s.sigma_nominal_kpa, 0)}"
                                    + ("" if s.included else " (excluded)"))
        if self.residual is not None and residual is not None:
            self._update_residual(s, residual)

    def _update_residual(self, s: StageResult, pick: ResidualPick) -> None:
        pass_no, lo, hi = pick
        u, k = self.u, self.u.factor("length")
        if pass_no != self.residual_pass:  # another pass chosen: draw its curve
            self.residual_pass = pass_no
            self.residual_curve.data = _scaled(_pass_curve(s, pass_no), u)
        data = residual_data(s, pick, u)
        _set(self.residual, data)  # type: ignore[arg-type]
        self.residual_box.update(left=lo * k, right=hi * k)
        value = ("not reached" if s.residual is None or s.residual.tau_kpa is None
                 else u.with_unit("stress", s.residual.tau_kpa, 1))
        if s.residual is not None and s.residual_source == "suggested" and not s.residual.reached \
                and s.residual.tau_kpa is not None:
            value += " (upper bound)"
        self.residual_label.update(x=hi * k, y=data["y"][0],
                                   text=f"residual {value}, pass {pass_no}, {s.residual_source}")


def _set(source: ColumnDataSource, data: dict[str, list[float]]) -> None:
    """Write ``data`` unless the source already holds it (no needless message, no echo)."""
    if {k: list(source.data.get(k, [])) for k in data} != data:
        source.data = data


def _line(fit, sigma_max: float) -> dict[str, list[float]]:
    if fit is None:
        return {"x": [], "y": [], "lo": [], "hi": []}
    xs = np.linspace(0.0, sigma_max * 1.15, 40)
    lo, hi = confidence_band(fit, xs, fit.level)
    return {"x": xs.tolist(), "y": (fit.intercept + fit.slope * xs).tolist(), "lo": lo.tolist(), "hi": hi.tolist()}


class EnvelopePlot:
    """tau against sigma' for one group: included and excluded points, the envelopes and their bands.

    Peak and critical state always; residual when the group holds reversal tests.
    """

    STYLES = (("peak", PEAK, "triangle"), ("critical_state", CRIT, "circle"), ("residual", RESIDUAL, "square"))

    def __init__(self, results: Results, group: str, u: Display = SI) -> None:
        self.group = group
        self.curved = False
        self.u = u
        safe = group.replace(" ", "_")
        p = figure(title=f"Envelopes - {group}", height=430, width=560, tools=TOOLS, name=f"live-envelope-{safe}",
                   x_axis_label=u.label("normal stress sigma'", "stress"),
                   y_axis_label=u.label("shear stress tau", "stress"))
        p.toolbar.logo = None
        self.sources: dict[str, dict[str, ColumnDataSource]] = {}
        self._drawn: dict[str, tuple[EnvelopeResult, float, bool]] = {}
        items = []
        present = {e.kind for e in results.envelopes if e.group == group}
        self.kinds = [st for st in self.STYLES if st[0] in present or st[0] != "residual"]
        for kind, colour, marker in self.kinds:
            src = {n: ColumnDataSource({k: [] for k in cols}) for n, cols in (
                ("in", ("x", "y", "stage")), ("out", ("x", "y", "stage")), ("line", ("x", "y", "lo", "hi")),
                ("curve", ("x", "y")))}
            self.sources[kind] = src
            name = kind.replace("_", " ")
            band = p.varea("x", "lo", "hi", source=src["line"], fill_color=colour, fill_alpha=0.14)
            line = p.line("x", "y", source=src["line"], color=colour, line_width=2)
            curve = p.line("x", "y", source=src["curve"], color=colour, line_width=2, line_dash="dotdash")
            pts = p.scatter("x", "y", source=src["in"], size=10, color=colour, marker=marker)
            p.add_layout(LabelSet(x="x", y="y", text="stage", source=src["in"], text_font_size="9px", x_offset=6,
                                  y_offset=-4, text_color=colour))  # each point named by its stage
            out = p.scatter("x", "y", source=src["out"], size=9, fill_color=GREY, line_color="#6d747a", marker=marker,
                            alpha=0.8)
            items += [LegendItem(label=f"{name}: stages, envelope, 95 % band of the mean line",
                                 renderers=[pts, line, band]),
                      LegendItem(label=f"{name}: excluded stages", renderers=[out]),
                      LegendItem(label=f"{name}: curved envelope (when shown)", renderers=[curve])]
        sf = "0.0" if u.is_si else "0"
        p.add_tools(HoverTool(tooltips=[("stage", "@stage"), ("sigma'", f"@x{{{sf}}} {u.unit('stress')}"),
                                        ("tau", f"@y{{{sf}}} {u.unit('stress')}")]))
        p.x_range.start = 0
        p.y_range.start = 0
        p.add_layout(Legend(items=items, ncols=2, label_text_font_size="9px", spacing=0, padding=4, margin=4), "below")
        self.figure = p
        self.update(results)

    def update(self, results: Results) -> None:
        members = [s for s in results.stages if s.in_group(self.group)]
        sigma_max = max([1.0, *(s.cs.sigma_kpa for s in members), *(s.peak.sigma_kpa for s in members)])
        for kind, _, _ in self.kinds:
            env: EnvelopeResult = results.envelope(self.group, kind)
            src = self.sources[kind]
            out = {s.stage_id: p for s in members
                   if not s.included and (p := s.strength(kind)) is not None and p.tau_kpa is not None}
            k = self.u.factor("stress")
            _set(src["in"], {"x": [v * k for v in env.sigma_kpa], "y": [v * k for v in env.tau_kpa],
                             "stage": list(env.stage_ids)})
            _set(src["out"], {"x": [p.sigma_kpa * k for p in out.values()], "y": [p.tau_kpa * k for p in out.values()],
                              "stage": list(out)})
            drawn = (env, sigma_max, self.curved)
            if self._drawn.get(kind) != drawn:  # the band needs t quantiles: only when the fit changed
                self._drawn[kind] = drawn
                _set(src["line"], {c: [v * k for v in vs] for c, vs in _line(env.chosen, sigma_max).items()})
                _set(src["curve"], {c: [v * k for v in vs] for c, vs in self._curve(env, sigma_max).items()})

    def _curve(self, env: EnvelopeResult, sigma_max: float) -> dict[str, list]:
        empty: dict[str, list] = {"x": [], "y": []}
        if not self.curved or len(env.sigma_kpa) < 3:
            return empty
        try:
            power = fit_power_law(env.sigma_kpa, env.tau_kpa)
        except (ValueError, RuntimeError):
            return empty
        xs = np.linspace(sigma_max * 0.02, sigma_max * 1.15, 40)
        return {"x": xs.tolist(), "y": power.tau_kpa(xs).tolist()}
