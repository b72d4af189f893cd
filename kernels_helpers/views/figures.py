"""Static Bokeh figures of stages and envelopes (display only: curves decimated, numbers untouched).

Curves longer than :data:`DISPLAY_POINTS` are decimated for display with the
Largest-Triangle-Three-Buckets algorithm (``tsdownsample``); every computation uses all readings.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, cast

import numpy as np
from bokeh.layouts import column
from bokeh.model import Model
from bokeh.models import (
    BoxAnnotation,
    ColumnDataSource,
    GlyphRenderer,
    GridPlot,
    HoverTool,
    Legend,
    Line,
    SaveTool,
    Scatter,
    Span,
    Toolbar,
    ToolProxy,
)
from bokeh.plotting import figure
from tsdownsample import LTTBDownsampler

from ..decisions import Cohesion, PickKind
from ..display_units import SI, Display
from ..results import EnvelopeResult, Results, StageResult

__all__ = ["DISPLAY_POINTS", "Plot", "Sources", "decimate", "envelope_figure", "envelope_plot", "linked_row",
           "stage_figure", "stage_plot"]

DISPLAY_POINTS = 1500
# Colours of our own: ink for curves, amber for peaks, teal for critical state, grey for excluded.
INK, PEAK, CRIT, GREY, SUGGESTED = "#1f3b57", "#d9822b", "#1b8a7a", "#a0a7ad", "#7a5195"
RESIDUAL = "#8c564b"
DESIGN = "#8c2d04"  # characteristic line and design range
TOOLS = "pan,box_zoom,wheel_zoom,reset,save"


def decimate(x: np.ndarray, columns: list[np.ndarray], n_out: int = DISPLAY_POINTS) -> np.ndarray:
    """Indices of the readings to draw: union of LTTB selections of every column (in reading order)."""
    n = len(x)
    if n <= n_out:
        return np.arange(n)
    order = np.arange(n, dtype=np.float64)
    keep: set[int] = set()
    for col in columns:
        ok = np.isfinite(col)
        idx = np.flatnonzero(ok)
        sel = LTTBDownsampler().downsample(order[ok], np.ascontiguousarray(col[ok]), n_out=min(n_out, len(idx)))
        keep.update(int(i) for i in idx[sel])
    return np.array(sorted(keep))


def _panel(title: str, y_label: str, name: str, x_range=None, u: Display = SI) -> figure:
    shared = {"x_range": x_range} if x_range is not None else {}
    p = figure(title=title, height=220, width=380, tools=TOOLS, name=name,
               x_axis_label=u.label("horizontal displacement", "length"), y_axis_label=y_label, toolbar_location=None,
               **shared)
    p.title.text_font_size = "11px"
    return p


def linked_row(plots: list[figure]) -> GridPlot:
    """Plots side by side under one toolbar (what ``bokeh.layouts.gridplot`` makes, built directly).

    Each tool of the first plot is joined by a :class:`ToolProxy` with the same tool of the others,
    so one button works all plots; a single save tool saves the row. ``gridplot`` walks every model
    of every plot and compares every tool's properties to find that out, which costs more than the
    plots themselves on a long record.
    """
    per_plot = [[t for t in p.toolbar.tools if not isinstance(t, SaveTool)] for p in plots]
    proxies = [ToolProxy(tools=list(group)) for group in zip(*per_plot, strict=True)]
    toolbar = Toolbar(tools=[*proxies, SaveTool()], logo=None)
    return GridPlot(children=[(p, 0, i) for i, p in enumerate(plots)], toolbar=toolbar, toolbar_location="right")


def _draw(p: figure, glyph, source: ColumnDataSource) -> GlyphRenderer:
    """Add a glyph without the selection and mute variants ``figure.line`` builds: nothing here
    selects or mutes, and BokehJS derives them itself when asked ("auto")."""
    r = GlyphRenderer(data_source=source, glyph=glyph)
    p.renderers.append(r)
    return r


Columns = dict[str, Any]  # a data source's columns (what a ColumnDataSource holds)
Sources = dict[str, Columns]


@dataclass(frozen=True)
class Plot:
    """A figure before it is drawn: its data sources by role, and the function that draws it from them.

    The sources are in the order the drawn figure holds them (Bokeh's walk of its models, which tags them
    in a record), so verify compares a record's plotted data with a re-run's without drawing a figure:
    drawing is most of the cost. Each figure's ``draw`` adds its glyphs source by source in this order;
    tests/test_figures_data.py checks the order and the values against the drawn figures.
    """

    sources: Sources
    draw: Callable[[Sources], Model]

    def figure(self) -> Model:
        """The Bokeh layout of this plot."""
        return self.draw(self.sources)


STAGE_COLUMNS = {"x_mm": "length", "tau_kpa": "stress", "y_mm": "length", "e": None, "dydx": None, "ratio": None}


def stage_plot(s: StageResult, u: Display = SI) -> Plot:
    """Shear stress, vertical displacement and void ratio against horizontal displacement (in display units).

    Sources: the readings (decimated; their columns keep the canonical names x_mm, tau_kpa, y_mm and hold
    display units), the critical-state windows (chosen and suggested) and, unless the stage has no distinct
    peak and keeps the suggestion, the peak points (chosen and suggested).
    """
    c = s.reduced.curve
    shear = c[c["in_shear"]]
    x = shear["x_mm"].to_numpy()
    keep = decimate(x, [shear["tau_kpa"].to_numpy(), shear["y_mm"].to_numpy()])
    d = shear.iloc[keep]
    L, S = u.factor("length"), u.factor("stress")
    # float32 is ample for drawing (7 digits) and halves the record; the computation keeps float64
    sources: Sources = {"readings": {k: (d[k].to_numpy() * (u.factor(q) if q else 1.0)).astype(np.float32)
                                     for k, q in STAGE_COLUMNS.items()}}
    cs, sug = s.critical_state.chosen, s.critical_state.suggested
    sources["critical state"] = {"x": [cs.x_from_mm * L, cs.x_to_mm * L], "tau": [cs.tau_kpa * S] * 2,
                                 "x_sug": [sug.x_from_mm * L, sug.x_to_mm * L], "tau_sug": [sug.tau_kpa * S] * 2}
    pk, q = s.peak.chosen, s.peak.suggested
    if not (s.no_distinct_peak and s.peak.source == "suggested"):
        sources["peak"] = {"x": [pk.x_mm * L], "tau": [pk.tau_kpa * S], "y": [float(c["y_mm"].iloc[pk.index]) * L],
                           "e": [pk.e], "x_sug": [q.x_mm * L], "tau_sug": [q.tau_kpa * S]}
    return Plot(sources, functools.partial(_draw_stage, s, u))


def stage_figure(s: StageResult, u: Display = SI) -> Model:
    """The stage's three plots in one row under one toolbar (:func:`stage_plot`, drawn)."""
    return stage_plot(s, u).figure()


def _draw_stage(s: StageResult, u: Display, sources: Sources) -> GridPlot:
    F = u.unit
    in_set = f" ({s.test_set})" if s.test_set else ""
    label = f"{s.stage_id}{in_set}: sigma'n {u.with_unit('stress', s.sigma_nominal_kpa, 0)}" + (
        "" if s.included else " (excluded)")
    colour = INK if s.included else GREY
    tau = _panel(f"{label} - shear stress", f"shear stress tau ({F('stress')})", f"stage-{s.stage_id}-tau", u=u)
    vert = _panel("vertical displacement (dilation +)", f"vertical displacement ({F('length')})",
                  f"stage-{s.stage_id}-y", tau.x_range, u=u)
    void = _panel("void ratio", "void ratio e", f"stage-{s.stage_id}-e", tau.x_range, u=u)
    src = {role: ColumnDataSource(columns) for role, columns in sources.items()}
    items = {"readings": [_draw(tau, Line(x="x_mm", y="tau_kpa", line_color=colour, line_width=1.2),
                                src["readings"])]}
    _draw(vert, Line(x="x_mm", y="y_mm", line_color=colour, line_width=1.2), src["readings"])
    _draw(void, Line(x="x_mm", y="e", line_color=colour, line_width=1.2), src["readings"])
    lfmt, sfmt = ("0.000", "0.0") if u.is_si else ("0.0000", "0")
    hover = [("x", f"@x_mm{{{lfmt}}} {F('length')}"), ("tau", f"@tau_kpa{{{sfmt}}} {F('stress')}"),
             ("y", f"@y_mm{{{lfmt}}} {F('length')}"), ("e", "@e{0.0000}"), ("dy/dx", "@dydx{+0.0000}")]
    window = sources["critical state"]["x"]
    for p in (tau, vert, void):
        p.add_layout(BoxAnnotation(left=window[0], right=window[1], fill_color=CRIT, fill_alpha=0.12))
        p.add_tools(HoverTool(tooltips=hover, mode="vline"))
    windows = src["critical state"]
    items["critical state (window mean)"] = [_draw(tau, Line(x="x", y="tau", line_color=CRIT, line_width=3), windows)]
    if s.critical_state.source == "manual":
        items["critical state suggested"] = [_draw(tau, Line(x="x_sug", y="tau_sug", line_color=SUGGESTED, line_width=2,
                                                             line_dash="dashed"), windows)]
    if "peak" in src:
        points = src["peak"]
        items["peak"] = [_draw(tau, Scatter(x="x", y="tau", size=11, fill_color=PEAK, line_color=PEAK,
                                            marker="diamond"), points)]
        _draw(vert, Scatter(x="x", y="y", size=9, fill_color=PEAK, line_color=PEAK, marker="diamond"), points)
        _draw(void, Scatter(x="x", y="e", size=9, fill_color=PEAK, line_color=PEAK, marker="diamond"), points)
        vert.add_layout(Span(location=sources["peak"]["x"][0], dimension="height", line_color=PEAK,
                             line_dash="dotted"))
        if s.peak.source == "manual":
            items["peak suggested"] = [_draw(tau, Scatter(x="x_sug", y="tau_sug", size=10, line_color=SUGGESTED,
                                                          fill_color=None, marker="diamond", line_width=2), points)]
    tau.add_layout(Legend(items=list(items.items()), location="bottom_right", label_text_font_size="9px"))
    return linked_row([tau, vert, void])


def _line_points(fit, sigma_max: float) -> tuple[list[float], list[float]]:
    xs = [0.0, sigma_max * 1.1]
    return xs, [fit.intercept + fit.slope * v for v in xs]


def _scaled(values, factor: float) -> list[float]:
    return [float(v) * factor for v in values]


STYLES = {"peak": (PEAK, "triangle"), "critical_state": (CRIT, "circle"), "residual": (RESIDUAL, "square")}


def _band(results: Results, env: EnvelopeResult):
    """The statistics of ``env`` and the band of its reported fit (None when it has none)."""
    stat = next((st for st in results.envelope_statistics if st.group == env.group and st.kind == env.kind), None)
    reported = "origin" if env.reported == Cohesion.ORIGIN else "free"
    return stat, next((b for b in stat.bands if b.fit == reported), None) if stat else None


def envelope_plot(results: Results, group: str, u: Display = SI) -> Plot:
    """tau against sigma' for one group, every pick type in one plot.

    Per pick type: the stages used and those excluded (grey), the reported straight line, its 95 %
    confidence band of the mean line (shaded) and prediction band for one new specimen (dashed), the
    power law (dot-dash), and, for the envelope the design values come from, the lower bound and the
    characteristic line. One figure per group: Bokeh's cost is per figure, and a checker reads the
    bands against the points they came from. A legend entry hides or shows its curves on a click.
    Sources by role, "<kind>:<what>" (points, excluded, mean band, prediction band, line, power law)
    and "design:<what>" (lower bound, characteristic line).
    """
    k = u.factor("stress")  # every stress drawn in display units
    members = {e.kind: e for e in results.envelopes if e.group == group}
    sources: Sources = {}
    sigma_max = max([1.0, *(v for e in members.values() for v in e.sigma_kpa)])
    out = [s for s in results.stages if s.in_group(group) and not s.included]
    for kind in [kind for kind in STYLES if kind in members]:
        env = members[kind]
        stat, band = _band(results, env)
        sources[f"{kind}:points"] = {
            "sigma": _scaled(env.sigma_kpa, k), "tau": _scaled(env.tau_kpa, k), "stage": list(env.stage_ids),
            "phi_sec": list(stat.secant_phi_deg) if stat else [float("nan")] * len(env.stage_ids)}
        if out and kind != "residual":
            gx = [s.strength(kind) for s in out]
            sources[f"{kind}:excluded"] = {"x": [q.sigma_kpa * k for q in gx], "y": [q.tau_kpa * k for q in gx]}
        fit = env.chosen
        if fit is None:
            continue
        if band is not None:
            xs, ys = list(band.sigma_kpa), list(band.line_kpa)
            sources[f"{kind}:mean band"] = {"x": np.asarray(band.sigma_kpa) * k,
                                            "y1": np.asarray(band.mean_lower_kpa) * k,
                                            "y2": np.asarray(band.mean_upper_kpa) * k}
            sources[f"{kind}:prediction band"] = {
                "xs": [_scaled(band.sigma_kpa, k)] * 2,
                "ys": [_scaled(band.prediction_lower_kpa, k), _scaled(band.prediction_upper_kpa, k)]}
        else:
            xs, ys = _line_points(fit, sigma_max)
        sources[f"{kind}:line"] = {"x": _scaled(xs, k), "y": _scaled(ys, k)}
        if stat is not None and stat.power is not None:
            px = np.linspace(xs[-1] / 400, xs[-1], 200)
            sources[f"{kind}:power law"] = {"x": px * k, "y": stat.power.tau_kpa(px) * k}
    d = results.design
    if d is not None and d.characteristic is not None and d.group == group and d.kind in members:
        ch = d.characteristic
        sources["design:lower bound"] = {"x": _scaled(ch.sigma_kpa, k), "y": _scaled(ch.tau_bound_kpa, k)}
        xs = list(ch.stress_range_kpa)
        sources["design:characteristic line"] = {"x": _scaled(xs, k),
                                                 "y": [(d.c_k_kpa + d.tan_phi_k * x) * k for x in xs]}
    return Plot(sources, functools.partial(_draw_envelope, results, group, u))


def envelope_figure(results: Results, group: str, u: Display = SI) -> Model:
    """The envelopes of one group (:func:`envelope_plot`, drawn)."""
    return envelope_plot(results, group, u).figure()


def _envelope_label(results: Results, env: EnvelopeResult, what: str, u: Display) -> str:
    name = env.kind.replace("_", " ")
    stat, band = _band(results, env)
    fit = env.chosen
    if what == "points":
        return f"{name}: not fitted"
    if what == "excluded":
        return f"{name} excluded"
    if what in ("mean band", "prediction band"):
        assert band is not None
        pct = f"{band.level * 100:g} %"
        return (f"{name}: {pct} confidence band of the mean line" if what == "mean band"
                else f"{name}: {pct} prediction band (one new specimen)")
    if what == "power law":
        assert stat is not None and stat.power is not None
        return f"{name}: power law tau = {stat.power.a:.3f} sigma'^{stat.power.b:.3f} (kPa)"
    assert what == "line" and fit is not None
    c_txt = "0" if fit.through_origin else u.fmt("stress", fit.intercept, 1)
    return f"{name}: c' {c_txt} {u.unit('stress')}, phi' {fit.phi_deg:.1f} deg"


def _draw_envelope(results: Results, group: str, u: Display, sources: Sources) -> Model:
    k = u.factor("stress")
    p = figure(title=f"Mohr-Coulomb envelopes - {group}", height=420, width=860, tools=TOOLS, name=f"envelope-{group}",
               x_axis_label=u.label("normal stress sigma'", "stress"),
               y_axis_label=u.label("shear stress tau", "stress"))
    p.toolbar.logo = None
    members = {e.kind: e for e in results.envelopes if e.group == group}
    d = results.design
    firsts: list[tuple[str, list[GlyphRenderer]]] = []  # each pick type's points and line, ahead of the rest
    items: list[tuple[str, list[GlyphRenderer]]] = []
    points: GlyphRenderer | None = None
    for role, columns in sources.items():
        kind, _, what = role.partition(":")
        src = ColumnDataSource(columns)
        if kind == "design":
            assert d is not None and d.characteristic is not None
            ch = d.characteristic
            if what == "lower bound":
                lo_r, hi_r = ch.stress_range_kpa
                p.add_layout(BoxAnnotation(left=lo_r * k, right=hi_r * k, fill_color=DESIGN, fill_alpha=0.05))
                label = f"{d.kind.replace('_', ' ')}: lower bound used for the characteristic value"
            else:
                label = (f"characteristic line: c'_k {u.with_unit('stress', d.c_k_kpa, 1)}, phi'_k "
                         f"{d.phi_k_deg:.1f} deg ({ch.expressed})")
            items.append((label, [p.line("x", "y", source=src, color=DESIGN,
                                         line_width=1.5 if what == "lower bound" else 3)]))
            continue
        colour, marker = STYLES[kind]
        env = members[cast(PickKind, kind)]
        label = _envelope_label(results, env, what, u)
        if what == "points":
            points = p.scatter("sigma", "tau", source=src, size=10, color=colour, marker=marker)
            if env.chosen is None:
                firsts.append((label, [points]))
            continue
        r: GlyphRenderer
        if what == "excluded":
            r = p.scatter("x", "y", source=src, size=9, color=GREY, marker=marker, alpha=0.7)
        elif what == "mean band":
            r = p.varea("x", "y1", "y2", source=src, fill_color=colour, fill_alpha=0.15)
        elif what == "prediction band":
            r = p.multi_line("xs", "ys", source=src, color=colour, line_dash="dashed", line_width=1)
        elif what == "line":
            assert points is not None
            firsts.append((label, [points, p.line("x", "y", source=src, color=colour, line_width=2)]))
            continue
        else:
            r = p.line("x", "y", source=src, color=colour, line_dash="dotdash", line_width=1.5)
        items.append((label, [r]))
    fmt = "0.0" if u.is_si else "0"
    p.add_tools(HoverTool(tooltips=[("stage", "@stage"), ("sigma'", f"@sigma{{{fmt}}} {u.unit('stress')}"),
                                    ("tau", f"@tau{{{fmt}}} {u.unit('stress')}"),
                                    ("secant phi'", "@phi_sec{0.0} deg")]))
    p.x_range.start = 0
    p.y_range.start = 0
    legend = Legend(items=[*reversed(firsts), *items], location="top_left", label_text_font_size="9px",
                    click_policy="hide")
    p.add_layout(legend, "right")
    return column(p)
