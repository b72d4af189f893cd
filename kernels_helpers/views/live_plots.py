"""Bokeh figures of the live screen, with the sources the controller pushes new data into.

The live screen is one Bokeh document: the curves of the stage being interpreted (shear stress,
vertical displacement, stress ratio and rate of dilation, sharing the horizontal axis) beside the
envelope plot of one of its groups. Choosing another stage writes its data into the same figures.

The peak marker and the two ends of the critical-state window are one-point / two-point sources
edited by a ``PointDrawTool``; whatever the browser sends, the marker is snapped back onto the
readings by the controller. While a pick is dragged, the envelope follows it in the browser
(:data:`PREVIEW_JS`: the least-squares line through the group's points with the dragged stage's
point moved), drawn dashed and labelled as a preview; on release the kernel's refit replaces it.
Curves are decimated for display only (:func:`~kernels_helpers.views.figures.decimate`).
"""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any

import numpy as np
from bokeh.layouts import column, row
from bokeh.models import (
    BoxAnnotation,
    ColumnDataSource,
    CustomJS,
    DataRange1d,
    HoverTool,
    Label,
    LabelSet,
    Legend,
    LegendItem,
    PointDrawTool,
)
from bokeh.plotting import figure

from ..display_units import SI, Display
from ..envelope import confidence_band, fit_power_law
from ..results import EnvelopeResult, Results, StageResult
from .figures import CRIT, GREY, INK, PEAK, RESIDUAL, SUGGESTED, decimate

__all__ = ["PREVIEW_JS", "EnvelopePlot", "LivePlots", "StagePlots", "flag_places", "marker_data", "residual_data",
           "window_data"]

TOOLS = "pan,box_zoom,wheel_zoom,reset,save"
FLAG = "#b3261e"
# source column, axis label (its unit from the display units), title, quantity for the display units
CURVES = (("tau_kpa", "shear stress tau", "shear stress", "stress"),
          ("y_mm", "vertical displacement y", "vertical displacement (dilation +)", "length"),
          ("ratio", "stress ratio tau/sigma' (-)", "stress ratio", None),
          ("dydx", "rate of dilation dy/dx (-)", "rate of dilation", None))
QUANTITY = {"x_mm": "length", "tau_kpa": "stress", "tau_smooth_kpa": "stress", "sigma_kpa": "stress",
            "y_mm": "length", "abs_tau": "stress"}  # columns with a unit
Callback = Callable[[str, Any, Any], None]
ResidualPick = tuple[int, float, float]  # reversal tests: pass number, window from and to (mm)
RowOfLine = Callable[[int], int | None]  # a file line -> the row of the stage's readings (None: not in it)


def _xy(u: Display, xs: list[float], ys: list[float]) -> dict[str, list[float]]:
    """Points (canonical mm, kPa) in display units: what the page draws and sends back."""
    return {"x": [u.value("length", x) for x in xs], "y": [u.value("stress", y) for y in ys]}


def marker_data(s: StageResult, u: Display = SI) -> dict[str, list[float]]:
    """The peak marker: the chosen peak reading (x, smoothed tau), in display units."""
    return _xy(u, [s.peak.chosen.x_mm], [s.peak.chosen.tau_kpa])


def window_data(s: StageResult, u: Display = SI) -> dict[str, list[float]]:
    """The two ends of the critical-state window, drawn at the window's mean shear stress (display units)."""
    cs = s.critical_state.chosen
    return _xy(u, [cs.x_from_mm, cs.x_to_mm], [cs.tau_kpa, cs.tau_kpa])


def residual_data(s: StageResult, pick: ResidualPick | None, u: Display = SI) -> dict[str, list[float]]:
    """The two ends of the residual window, at the residual shear stress (mean |tau| over the window)."""
    if pick is None:
        return {"x": [], "y": []}
    _, lo, hi = pick
    r = None if s.residual is None else s.residual.chosen
    tau = r.tau_kpa if r is not None and r.tau_kpa is not None else _window_mean(s, pick)
    return _xy(u, [lo, hi], [tau, tau])


def _strip_data(s: StageResult, u: Display = SI) -> dict[str, list[float]]:
    """The critical-state window as a strip across a plot (display units)."""
    k = u.factor("length")
    return {"x0": [s.critical_state.chosen.x_from_mm * k], "x1": [s.critical_state.chosen.x_to_mm * k]}


def _spike_data(s: StageResult, u: Display = SI) -> dict[str, list]:
    """The shearing readings a check flagged (spikes), at their place on the shear-stress curve."""
    c = s.reduced.curve
    sel = c[c["in_shear"].to_numpy() & c["spike"].to_numpy()]
    xs, ys = sel["x_mm"].tolist(), sel["tau_kpa"].tolist()
    return {**_xy(u, xs, ys), "text": ["isolated spike (Hampel filter): kept as read, left out of the smoothing "
                                       "and the suggestions"] * len(xs)}


_LINES = re.compile(r"lines? (\d+)\s*(?:-|and)\s*(\d+)")
_LINE = re.compile(r"at line (\d+)")
_MM_RANGE = re.compile(r"(\d+(?:\.\d+)?)\s*-\s*(\d+(?:\.\d+)?) mm")
_AT_MM = re.compile(r"at (\d+(?:\.\d+)?) mm")


def flag_places(s: StageResult, row_of_line: RowOfLine | None = None) -> list[tuple[float, float, str]]:
    """Where on the curve each flag of a stage applies, as displacement ranges (mm) with the flag's text.

    Read from the flag's own words: the file lines it names (a range, or one line), else the
    displacements it names (``a-b mm``; one or two ``at x mm``), else, for a flag about the critical
    state, the critical-state window. A too-fast flag covers the shearing up to failure. Isolated
    spikes are drawn as markers of their own; a flag naming no place (specimen size, void ratio) is
    listed beside the stage only.
    """
    c = s.reduced.curve
    x_all = c["x_mm"].to_numpy()
    x_shear = x_all[c["in_shear"].to_numpy()]
    if not x_shear.size:
        return []
    x0, x1 = float(x_shear[0]), float(x_shear[-1])
    half = max((x1 - x0) * 0.004, 1e-3)  # a flag at one reading is drawn this wide each side

    def at_row(line: int) -> float | None:
        row_no = row_of_line(line) if row_of_line is not None else None
        return float(x_all[row_no]) if row_no is not None and 0 <= row_no < len(x_all) else None

    places = []
    for f in s.flags:
        if "isolated spike" in f:
            continue  # drawn as markers on the readings
        span: tuple[float, float] | None = None
        if (m := _LINES.search(f)) and (a := at_row(int(m[1]))) is not None and (b := at_row(int(m[2]))) is not None:
            span = (a, b)
        elif (m := _LINE.search(f)) and (a := at_row(int(m[1]))) is not None:
            span = (a, a)
        elif f.startswith("too fast") and (m := _AT_MM.search(f)):
            span = (x0, float(m[1]))
        elif m := _MM_RANGE.search(f):
            span = (float(m[1]), float(m[2]))
        elif found := [float(v) for v in _AT_MM.findall(f)]:
            span = (min(found), max(found))
        elif "critical state" in f:
            span = (s.critical_state.chosen.x_from_mm, s.critical_state.chosen.x_to_mm)
        if span is not None:
            lo, hi = sorted(span)
            places.append((lo - half if hi - lo < 2 * half else lo, hi + half if hi - lo < 2 * half else hi, f))
    return places


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


def _pass_curve(s: StageResult, pick: ResidualPick | None) -> dict[str, np.ndarray]:
    if pick is None:
        return {"x_mm": np.array([]), "abs_tau": np.array([])}
    x, tau = _pass_rows(s, pick[0])
    keep = decimate(x, [tau])
    return {"x_mm": x[keep], "abs_tau": tau[keep]}


CURVE_COLUMNS = ("x_mm", "tau_kpa", "tau_smooth_kpa", "sigma_kpa", "y_mm", "ratio", "dydx", "e")


def _curve_data(s: StageResult) -> dict[str, np.ndarray]:
    c = s.reduced.curve
    shear = c[c["in_shear"].to_numpy() & (c["pass_no"].to_numpy() == 1)]
    keep = decimate(shear["x_mm"].to_numpy(), [shear[k].to_numpy() for k, _, _, _ in CURVES])
    d = shear.iloc[keep]
    return {k: d[k].to_numpy() for k in CURVE_COLUMNS}


def _places_data(s: StageResult, u: Display, row_of_line: RowOfLine | None) -> dict[str, list]:
    k = u.factor("length")
    places = flag_places(s, row_of_line)
    return {"left": [a * k for a, _, _ in places], "right": [b * k for _, b, _ in places],
            "bottom": [-1e12] * len(places), "top": [1e12] * len(places),
            "text": [u.annotate(t) for _, _, t in places]}


class StagePlots:
    """The four linked plots of the stage being interpreted, the draggable picks, and how to redraw them.

    Built once; :meth:`update` draws another stage (or the same stage after an edit) into the same
    figures. ``reversal``: whether any stage of the project is a reversal test (the residual layers
    are then built, and filled only for such stages).
    """

    def __init__(self, s: StageResult, on_peak: Callback, on_window: Callback, on_residual: Callback | None = None,
                 reversal: bool = False, u: Display = SI, row_of_line: RowOfLine | None = None) -> None:
        """Everything is drawn in the display units ``u``; the callbacks receive display units (the
        widgets turn them back into mm before the controller sees them)."""
        self.stage_id = s.stage_id
        self.u = u
        self.row_of_line = row_of_line
        self.curve = ColumnDataSource(_scaled(_curve_data(s), u))
        self.peak = ColumnDataSource(marker_data(s, u))
        self.window = ColumnDataSource(window_data(s, u))
        self.peak_suggested = ColumnDataSource(_xy(u, [s.peak.suggested.x_mm], [s.peak.suggested.tau_kpa]))
        self.plots = [self._plot(i, key, label, title, q) for i, (key, label, title, q) in enumerate(CURVES)]
        k = u.factor("length")
        # the window and the peak across all four plots, each from one source (one change per edit, not four),
        # drawn on the overlay layer: moving them repaints no curve
        self.window_strip = ColumnDataSource(_strip_data(s, u))
        self.peak_line = ColumnDataSource({"x": [s.peak.chosen.x_mm * k]})
        for p in self.plots:
            p.vstrip(x0="x0", x1="x1", source=self.window_strip, fill_color=CRIT, fill_alpha=0.13, line_alpha=0,
                     level="overlay")
            p.vspan(x="x", source=self.peak_line, line_color=PEAK, line_dash="dashed", line_width=1.5,
                    level="overlay")
        tau = self.plots[0]
        readings = tau.renderers[0]
        tau.y_range = DataRange1d(renderers=[readings])  # the flag ranges below do not stretch the axis
        # flags that apply over a range of the curve: shaded there (hover for the flag); spikes: markers
        self.places = ColumnDataSource(_places_data(s, u, row_of_line))
        shaded = tau.quad(left="left", right="right", bottom="bottom", top="top", source=self.places,
                          fill_color=FLAG, fill_alpha=0.06, line_color=None, hatch_pattern="/",
                          hatch_color=FLAG, hatch_alpha=0.12, hatch_scale=10, level="underlay")
        ghost = tau.scatter("x", "y", source=self.peak_suggested, size=13, marker="diamond", fill_color=None,
                            line_color=SUGGESTED, line_width=2)
        win = tau.scatter("x", "y", source=self.window, size=13, marker="square", fill_color=CRIT, line_color="white",
                          level="overlay")
        self.flagged = ColumnDataSource(_spike_data(s, u))
        self._flagged_for = s.reduced  # flags depend on the reduction only: redrawn when it changes, not per pick
        self._placed_for: tuple[object, ...] = ()
        spikes = tau.scatter("x", "y", source=self.flagged, size=9, marker="x", line_color=FLAG, line_width=2)
        tau.add_tools(HoverTool(renderers=[spikes, shaded], tooltips=[("flag", "@text")]))
        mark = tau.scatter("x", "y", source=self.peak, size=15, marker="diamond", fill_color=PEAK, line_color="white",
                           level="overlay")
        # which pick is which, in words on the plot (not only by the marker's fill)
        self.peak_label = ColumnDataSource({"x": [0.0], "y": [0.0], "text": [""]})  # one row: one change per edit
        tau.add_layout(LabelSet(x="x", y="y", text="text", source=self.peak_label, text_font_size="10px",
                                text_color=PEAK, x_offset=10, y_offset=-16, background_fill_color="white",
                                background_fill_alpha=0.8, level="overlay"))
        draggable, items = [mark, win], [
            LegendItem(label="readings", renderers=[readings]),
            LegendItem(label="suggested peak", renderers=[ghost]),
            LegendItem(label="peak (drag it)", renderers=[mark]),
            LegendItem(label="critical-state window (drag its ends)", renderers=[win]),
            LegendItem(label="flagged: readings, ranges (hover)", renderers=[spikes, shaded]),
        ]
        self.residual: ColumnDataSource | None = None
        if reversal:
            draggable.append(self._residual_layers(items))
        tool = PointDrawTool(renderers=draggable, add=False, drag=True,
                             description="drag the peak or the window ends" if not reversal else
                             "drag the peak, the critical-state window ends or the residual window ends")
        tau.add_tools(tool)
        tau.toolbar.active_tap = tool
        # on the overlay layer with the picks, so the window's strip never covers it
        tau.add_layout(Legend(items=items, location="bottom_right", label_text_font_size="9px", spacing=0, padding=3,
                              margin=4, label_height=11, glyph_height=11, background_fill_alpha=0.75,
                              level="overlay"))
        self.peak.on_change("data", on_peak)
        self.window.on_change("data", on_window)
        if self.residual is not None and on_residual is not None:
            self.residual.on_change("data", on_residual)
        self.update(s, None)

    def _residual_layers(self, items: list[LegendItem]) -> Any:
        """On the shear-stress plot: |tau| of the residual pass, the shaded window, its two ends, the value."""
        tau = self.plots[0]
        self.residual_pass: int | None = None
        self.residual_curve = ColumnDataSource({"x_mm": [], "abs_tau": []})
        self.residual = ColumnDataSource({"x": [], "y": []})
        self.residual_box = BoxAnnotation(left=0, right=0, fill_color=RESIDUAL, fill_alpha=0.10, visible=False,
                                          hatch_pattern="/", hatch_color=RESIDUAL, hatch_alpha=0.25, level="overlay")
        self.residual_label = Label(x=0.0, y=0.0, text="", text_font_size="10px", text_color=RESIDUAL,
                                    text_align="right", text_baseline="bottom", y_offset=9,
                                    background_fill_color="white", background_fill_alpha=0.8, level="overlay")
        tau.add_layout(self.residual_box)
        tau.add_layout(self.residual_label)
        line = tau.line("x_mm", "abs_tau", source=self.residual_curve, color=RESIDUAL, line_width=1.1, alpha=0.85)
        ends = tau.scatter("x", "y", source=self.residual, size=13, marker="square", fill_color=RESIDUAL,
                           line_color="white", level="overlay")
        tau.y_range.renderers = [*tau.y_range.renderers, line]
        items += [LegendItem(label="|tau| on the residual pass", renderers=[line]),
                  LegendItem(label="residual window ends (drag them)", renderers=[ends])]
        return ends

    def _plot(self, i: int, key: str, label: str, title: str, quantity: str | None):
        shared = {"x_range": self.plots_x_range} if i else {}
        u = self.u
        size = {"height": 300} if not i else {"height": 185 if key != "ratio" else 170}
        p = figure(tools=TOOLS, name=f"live-{key.split('_')[0]}", sizing_mode="stretch_width", min_width=200,
                   title=title, x_axis_label=u.label("horizontal displacement", "length"),
                   y_axis_label=u.label(label, quantity) if quantity else label,  # type: ignore[arg-type]
                   **size, **shared)
        if not i:
            self.plots_x_range = p.x_range
        p.toolbar.logo = None
        p.toolbar.autohide = True
        p.title.text_font_size = "11px"
        p.axis.axis_label_text_font_size = "10px"
        r = p.line("x_mm", key, source=self.curve, color=INK, line_width=1.3)
        p.y_range = DataRange1d(renderers=[r])  # the curve sets the axis, not the strips and lines across it
        lf, sf = ("0.000", "0.0") if u.is_si else ("0.0000", "0")
        L, S = u.unit("length"), u.unit("stress")
        p.add_tools(HoverTool(renderers=[r], mode="vline", tooltips=[
            ("x", f"@x_mm{{{lf}}} {L}"), ("tau", f"@tau_kpa{{{sf}}} {S}"), ("y", f"@y_mm{{+{lf}}} {L}"),
            ("tau/sigma'", "@ratio{0.000}"), ("dy/dx", "@dydx{+0.0000}"), ("e", "@e{0.0000}")]))
        return p

    def update(self, s: StageResult, residual: ResidualPick | None = None) -> None:
        """Draw stage ``s`` (only what differs is sent to the page); ``residual``: its residual window in use."""
        new_curve = s.stage_id != self.stage_id or s.reduced is not self._flagged_for
        if new_curve:
            self.stage_id = s.stage_id
            self._flagged_for = s.reduced
            self.curve.data = _scaled(_curve_data(s), self.u)
            _set(self.flagged, _spike_data(s, self.u))
        # what the shaded places are read from, with the curve
        placed = (s.flags, s.critical_state.chosen.x_from_mm, s.critical_state.chosen.x_to_mm)
        if new_curve or placed != self._placed_for:
            self._placed_for = placed
            _set(self.places, _places_data(s, self.u, self.row_of_line))
        colour = INK if s.included else GREY
        for p in self.plots:
            p.renderers[0].glyph.line_color = colour
            p.background_fill_color = "white" if s.included else "#f1f2f3"
        u, k = self.u, self.u.factor("length")
        _set(self.window_strip, _strip_data(s, u))
        _set(self.peak_line, {"x": [s.peak.chosen.x_mm * k]})
        _set(self.peak, marker_data(s, u))
        _set(self.window, window_data(s, u))
        shown = marker_data(s, u)
        words = ("no distinct peak" if s.no_distinct_peak and s.peak.source == "suggested"
                 else "manual peak" if s.peak.source == "manual" else "suggested peak")
        _set(self.peak_label, {"x": shown["x"], "y": shown["y"], "text": [words]})
        _set(self.peak_suggested, _xy(u, [s.peak.suggested.x_mm], [s.peak.suggested.tau_kpa]))
        in_set = f" ({s.test_set})" if s.test_set else ""
        self.plots[0].title.text = (f"{s.stage_id}{in_set} - shear stress, sigma'n "
                                    f"{u.with_unit('stress', s.sigma_nominal_kpa, 0)}"
                                    + ("" if s.included else " (excluded)"))
        if self.residual is not None:
            self._update_residual(s, residual)

    def _update_residual(self, s: StageResult, pick: ResidualPick | None) -> None:
        u, k = self.u, self.u.factor("length")
        pass_no = pick[0] if pick is not None else None
        if pass_no != self.residual_pass or s.stage_id != getattr(self, "_residual_for", None):
            self.residual_pass = pass_no  # another pass or another stage: draw its curve
            self._residual_for = s.stage_id
            self.residual_curve.data = _scaled(_pass_curve(s, pick), u)
        data = residual_data(s, pick, u)
        _set(self.residual, data)  # type: ignore[arg-type, arg-type]
        if pick is None:
            self.residual_box.visible = False
            self.residual_label.text = ""
            return
        _, lo, hi = pick
        self.residual_box.update(left=lo * k, right=hi * k, visible=True)
        source = "suggested" if s.residual is None else s.residual.source
        r = None if s.residual is None else s.residual.chosen
        value = "not reached" if r is None or r.tau_kpa is None else u.with_unit("stress", r.tau_kpa, 1)
        if r is not None and source == "suggested" and not r.reached and r.tau_kpa is not None:
            value += " (upper bound)"
        self.residual_label.update(x=hi * k, y=data["y"][0], text=f"residual {value}, pass {pass_no}, {source}")


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


def fit_words(env: EnvelopeResult, u: Display = SI) -> str:
    """The fit of one envelope in a few words, for its label on the plot."""
    name = env.kind.replace("_", " ")
    fit = env.chosen
    if fit is None:
        return f"{name}: not fitted"
    c = "c' = 0 (fixed)" if fit.through_origin else f"c' {u.with_unit('stress', fit.intercept, 1)}"
    return f"{name}: phi' {fit.phi_deg:.1f} deg, {c} (n = {fit.n})"


class EnvelopePlot:
    """tau against sigma' for one group at a time: included and excluded points, the envelopes and bands.

    Peak and critical state always; residual when the project holds reversal tests. :meth:`show`
    switches to another group. Each envelope has a dashed preview line (filled in the browser while
    a pick is dragged) and a label with its fit, which the preview rewrites until the kernel answers.
    """

    STYLES = (("peak", PEAK, "triangle"), ("critical_state", CRIT, "circle"), ("residual", RESIDUAL, "square"))

    def __init__(self, results: Results, group: str, u: Display = SI) -> None:
        self.group = group
        self.curved = False
        self.u = u
        p = figure(title=f"Envelopes - {group}", height=485, min_width=300, sizing_mode="stretch_width", tools=TOOLS,
                   name="live-envelope", x_axis_label=u.label("normal stress sigma'", "stress"),
                   y_axis_label=u.label("shear stress tau", "stress"))
        p.toolbar.logo = None
        p.toolbar.autohide = True
        p.title.text_font_size = "11px"
        p.axis.axis_label_text_font_size = "10px"
        self.sources: dict[str, dict[str, ColumnDataSource]] = {}
        self.labels: dict[str, ColumnDataSource] = {}  # the fit in words, per kind
        self._drawn: dict[str, tuple[EnvelopeResult, float, bool]] = {}
        items = []
        present = {e.kind for e in results.envelopes}
        self.kinds = [st for st in self.STYLES if st[0] in present or st[0] != "residual"]
        for kind, colour, marker in self.kinds:
            src = {n: ColumnDataSource({k: [] for k in cols}) for n, cols in (
                ("in", ("x", "y", "stage")), ("out", ("x", "y", "stage")), ("line", ("x", "y", "lo", "hi")),
                ("curve", ("x", "y")), ("preview", ("x", "y")))}
            self.sources[kind] = src
            name = kind.replace("_", " ")
            band = p.varea("x", "lo", "hi", source=src["line"], fill_color=colour, fill_alpha=0.14)
            line = p.line("x", "y", source=src["line"], color=colour, line_width=2)
            preview = p.line("x", "y", source=src["preview"], color=colour, line_width=2.5, line_dash="dashed",
                             alpha=0.9, level="overlay")
            curve = p.line("x", "y", source=src["curve"], color=colour, line_width=2, line_dash="dotdash")
            pts = p.scatter("x", "y", source=src["in"], size=10, color=colour, marker=marker)
            p.add_layout(LabelSet(x="x", y="y", text="stage", source=src["in"], text_font_size="9px", x_offset=6,
                                  y_offset=-4, text_color=colour))  # each point named by its stage
            out = p.scatter("x", "y", source=src["out"], size=9, fill_color=GREY, line_color="#6d747a", marker=marker,
                            alpha=0.8)
            # the fit in words at the top left of the plot, from a one-row source: the preview rewrites its text
            # in place (no change of a model property, so nothing goes to the kernel while dragging), and it is
            # inside the plot (a title's change would lay the whole screen out again)
            self.labels[kind] = ColumnDataSource({"x": [6], "y": [6 + 16 * len(self.labels)], "text": [""]})
            p.add_layout(LabelSet(x="x", y="y", text="text", source=self.labels[kind], x_units="screen",
                                  y_units="screen", text_baseline="top", text_font_size="10.5px", text_color=colour,
                                  text_font_style="bold", background_fill_color="white", background_fill_alpha=0.85,
                                  name=f"fit-{kind}", level="overlay"))
            items += [LegendItem(label=f"{name} (95 % band)", renderers=[pts, line, band]),
                      LegendItem(label=f"{name}: preview while dragging", renderers=[preview]),
                      LegendItem(label=f"{name}: excluded", renderers=[out]),
                      LegendItem(label=f"{name}: curved (when shown)", renderers=[curve])]
        sf = "0.0" if u.is_si else "0"
        p.add_tools(HoverTool(tooltips=[("stage", "@stage"), ("sigma'", f"@x{{{sf}}} {u.unit('stress')}"),
                                        ("tau", f"@y{{{sf}}} {u.unit('stress')}")]))
        p.x_range.start = 0
        p.y_range.start = 0
        p.add_layout(Legend(items=items, location="bottom_right", label_text_font_size="8.5px", spacing=0, padding=3,
                            margin=4, label_height=10, glyph_height=10, glyph_width=16, background_fill_alpha=0.75,
                            click_policy="hide"))
        self.figure = p
        self.update(results)

    def show(self, results: Results, group: str) -> None:
        """Draw the envelopes of another group."""
        if group != self.group:
            self.group = group
            self._drawn.clear()
            self.figure.title.text = f"Envelopes - {group}"
        self.update(results)

    def update(self, results: Results) -> None:
        members = [s for s in results.stages if s.in_group(self.group)]
        sigmas = [s.critical_state.chosen.sigma_kpa for s in members] + [s.peak.chosen.sigma_kpa for s in members]
        sigma_max = max([1.0, *sigmas])
        k = self.u.factor("stress")
        for kind, _, _ in self.kinds:
            src = self.sources[kind]
            env = next((e for e in results.envelopes if e.group == self.group and e.kind == kind), None)
            if env is None:  # e.g. no residual in this group
                for name in ("in", "out", "line", "curve"):  # the preview is the page's own (PREVIEW_JS)
                    _set(src[name], {c: [] for c in src[name].data})
                _set(self.labels[kind], {"text": [""]})
                continue
            out = {s.stage_id: p for s in members
                   if not s.included and (p := s.strength(kind)) is not None and p.tau_kpa is not None}
            _set(src["in"], {"x": [v * k for v in env.sigma_kpa], "y": [v * k for v in env.tau_kpa],
                             "stage": list(env.stage_ids)})
            _set(src["out"], {"x": [p.sigma_kpa * k for p in out.values()], "y": [p.tau_kpa * k for p in out.values()],
                              "stage": list(out)})
            _set(self.labels[kind], {"text": [fit_words(env, self.u)]})
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


# The envelope follows a drag, in the browser. Runs on every change of the peak marker or the window ends (each
# mouse move while dragging) and of `state` (what the kernel last drew). The dragged stage's point is moved to
# the reading nearest the marker (the peak: smoothed tau and sigma' there; the window: mean tau and sigma' over
# it) and the line refitted as the kernel fits it: least squares, through the origin when the kernel's chosen
# fit is. Once the marker is back where the kernel put it, the preview is cleared and the kernel's label shown.
PREVIEW_JS = """
const sid = state.data.stage[0];
const cx = curve.data.x_mm, ctau = curve.data.tau_kpa, cts = curve.data.tau_smooth_kpa, csig = curve.data.sigma_kpa;
function nearest(x) {
  let best = -1, d = Infinity;
  for (let i = 0; i < cx.length; i++) { const e = Math.abs(cx[i] - x); if (e < d) { d = e; best = i; } }
  return best;
}
function point(kind) {
  if (kind === "peak") {
    const x = peak.data.x[0];
    if (x === undefined || Math.abs(x - state.data.peak_x[0]) <= 1e-9 * Math.max(1, Math.abs(x))) return null;
    const i = nearest(x);
    return i < 0 ? null : [csig[i], cts[i]];
  }
  const xs = win.data.x;
  if (xs.length !== 2) return null;
  const lo = Math.min(xs[0], xs[1]), hi = Math.max(xs[0], xs[1]);
  const tol = 1e-9 * Math.max(1, Math.abs(hi));
  if (Math.abs(lo - state.data.cs_from[0]) <= tol && Math.abs(hi - state.data.cs_to[0]) <= tol) return null;
  let n = 0, st = 0, ss = 0;
  for (let i = 0; i < cx.length; i++) { if (cx[i] >= lo && cx[i] <= hi) { n++; st += ctau[i]; ss += csig[i]; } }
  return n < 2 ? null : [ss / n, st / n];
}
// Write columns in place and redraw, as the drag tool itself does: no property changes, so jupyter_bokeh sends
// nothing to the kernel on each mouse move (the kernel never needs a preview, and would queue them before the drop).
// Unchanged columns are not written: the release repeats the last move, and a redraw costs the page tens of ms.
function put(src, cols) {
  const same = Object.entries(cols).every(([k, v]) => {
    const old = src.data[k];
    return old !== undefined && old.length === v.length && v.every((e, i) => old[i] === e);
  });
  if (same) return;
  for (const [k, v] of Object.entries(cols)) src.data[k] = v;
  src.change.emit();
}
function fit(xs, ys, origin) {
  const n = xs.length;
  if (origin) {
    let sxy = 0, sxx = 0;
    for (let i = 0; i < n; i++) { sxy += xs[i] * ys[i]; sxx += xs[i] * xs[i]; }
    return sxx > 0 ? [0, sxy / sxx] : null;
  }
  if (n < 2) return null;
  let mx = 0, my = 0;
  for (let i = 0; i < n; i++) { mx += xs[i] / n; my += ys[i] / n; }
  let sxy = 0, sxx = 0;
  for (let i = 0; i < n; i++) { sxy += (xs[i] - mx) * (ys[i] - my); sxx += (xs[i] - mx) * (xs[i] - mx); }
  if (!(sxx > 0)) return null;
  const b = sxy / sxx;
  return [my - b * mx, b];
}
for (const [kind, pts, prev, label, origin, words] of [
    ["peak", peak_in, peak_preview, peak_label, state.data.peak_origin[0], state.data.peak_words[0]],
    ["critical_state", cs_in, cs_preview, cs_label, state.data.cs_origin[0], state.data.cs_words[0]]]) {
  const moved = point(kind);
  const at = pts.data.stage.indexOf(sid);
  const sx = Array.from(pts.data.x), sy = Array.from(pts.data.y);
  const line = moved === null || at < 0 || origin === null ? null : (sx[at] = moved[0], sy[at] = moved[1],
                                                                     fit(sx, sy, origin));
  if (line === null) {
    if (prev.data.x.length) put(prev, {x: [], y: []});
    if (label.data.text[0] !== words) put(label, {text: [words]});
    continue;
  }
  const [c, b] = line;
  const xmax = Math.max(1, ...sx) * 1.15;
  put(prev, {x: [0, xmax], y: [c, c + b * xmax]});
  const phi = Math.atan(b) * 180 / Math.PI;
  const name = kind === "peak" ? "peak" : "critical state";
  const cw = origin ? "c' = 0 (fixed)" : "c' " + c.toFixed(unit_digits) + " " + stress_unit;
  put(label, {text: [name + " preview (browser, release to refit): phi' " + phi.toFixed(1) + " deg, " + cw]});
}
"""


class LivePlots:
    """The live screen's Bokeh document: the stage's curves beside the envelope plot, and the preview.

    ``state`` holds what the kernel last drew (the stage, its picks, the fit kinds and their words):
    the preview compares the markers with it, so a marker the kernel put back clears the preview.
    """

    def __init__(self, stage: StagePlots, envelope: EnvelopePlot, u: Display = SI) -> None:
        self.stage, self.envelope = stage, envelope
        self.state = ColumnDataSource({"stage": [""], "peak_x": [0.0], "cs_from": [0.0], "cs_to": [0.0],
                                       "peak_origin": [None], "cs_origin": [None], "peak_words": [""],
                                       "cs_words": [""]})
        src = envelope.sources
        preview = CustomJS(args={"state": self.state, "curve": stage.curve, "peak": stage.peak, "win": stage.window,
                                 "peak_in": src["peak"]["in"], "cs_in": src["critical_state"]["in"],
                                 "peak_preview": src["peak"]["preview"], "cs_preview": src["critical_state"]["preview"],
                                 "peak_label": envelope.labels["peak"], "cs_label": envelope.labels["critical_state"],
                                 "unit_digits": 1 if u.is_si else 0, "stress_unit": u.unit("stress")},
                           code=PREVIEW_JS)
        for source in (stage.peak, stage.window):
            source.js_on_change("change", preview)  # every mouse move of a drag (the tool redraws in place)
        self.state.js_on_change("data", preview)
        tau, y, ratio, dydx = stage.plots
        # the dragged curve and the envelope side by side, as tall as each other; the stress ratio below
        curves = column(tau, row(y, dydx, sizing_mode="stretch_width"), sizing_mode="stretch_width")
        self.layout = column(row(curves, envelope.figure, sizing_mode="stretch_width"),
                             row(ratio, sizing_mode="stretch_width"), sizing_mode="stretch_width", name="live-screen")

    def record_state(self, s: StageResult, results: Results) -> None:
        """What the kernel drew for stage ``s`` and the envelope group shown (the preview's reference)."""
        k = self.stage.u.factor("length")

        def chosen(kind: str) -> tuple[bool | None, str]:
            env = next((e for e in results.envelopes if e.group == self.envelope.group and e.kind == kind), None)
            words = self.envelope.labels[kind].data["text"][0]
            return (None if env is None or env.chosen is None else env.chosen.through_origin), words

        (po, pw), (co, cw) = chosen("peak"), chosen("critical_state")
        cs = s.critical_state.chosen
        _set(self.state, {"stage": [s.stage_id], "peak_x": [s.peak.chosen.x_mm * k], "cs_from": [cs.x_from_mm * k],
                          "cs_to": [cs.x_to_mm * k], "peak_origin": [po], "cs_origin": [co], "peak_words": [pw],
                          "cs_words": [cw]})
