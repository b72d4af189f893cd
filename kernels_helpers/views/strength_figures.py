"""Figures of the derived results: critical-state line and Taylor's ratio (bands: ``figures.envelope_figure``).

Display only: every number drawn comes from :mod:`kernels_helpers.derived` or the pure functions
it uses; curves are decimated as in :mod:`.figures`.
"""

from __future__ import annotations

import functools

import numpy as np
from bokeh.layouts import column
from bokeh.model import Model
from bokeh.models import ColumnDataSource, HoverTool, Legend
from bokeh.plotting import figure

from ..critical_state import CriticalStateLine
from ..dilatancy import interlocking_free_ratio
from ..display_units import SI, Display
from ..results import Results
from .figures import CRIT, GREY, INK, PEAK, SUGGESTED, TOOLS, Plot, Sources, decimate

__all__ = ["critical_state_figure", "critical_state_plot", "taylor_figure", "taylor_plot"]

SET_COLOURS = (INK, PEAK, CRIT, SUGGESTED, "#8c2d04", "#4d7c0f")


def _figure(title: str, name: str, **kw) -> figure:
    p = figure(title=title, height=380, width=560, tools=TOOLS, name=name, **kw)
    p.toolbar.logo = None
    p.title.text_font_size = "11px"
    return p


def critical_state_plot(results: Results, line: CriticalStateLine, u: Display = SI) -> Plot:
    """Void ratio against ln sigma': start of shear and critical state per stage, and the fitted line.

    Sources: one per test set ("set <n>", in the line's order: the stages' stress, start and critical void
    ratios), then the fitted line ("line").
    """
    k = u.factor("stress")
    sources: Sources = {}
    for n, test_set in enumerate(dict.fromkeys(line.test_sets)):
        idx = [j for j, t in enumerate(line.test_sets) if t == test_set]
        sources[f"set {n}"] = {"sigma": [line.sigma_kpa[j] * k for j in idx], "e": [line.e_cs[j] for j in idx],
                                      "e0": [line.e_start[j] for j in idx], "stage": [line.stage_ids[j] for j in idx]}
    xs = np.geomspace(min(line.sigma_kpa) / 1.5, max(line.sigma_kpa) * 1.5, 30)
    sources["line"] = {"x": xs * k, "y": [line.e_at(x) for x in xs]}
    return Plot(sources, functools.partial(_draw_critical_state, line, u))


def critical_state_figure(results: Results, line: CriticalStateLine, u: Display = SI) -> Model:
    """The critical-state line of one group (:func:`critical_state_plot`, drawn)."""
    return critical_state_plot(results, line, u).figure()


def _draw_critical_state(line: CriticalStateLine, u: Display, sources: Sources) -> Model:
    p = _figure(f"critical-state line - {line.group}", f"csl-{line.group}", x_axis_type="log",
                x_axis_label=f"normal stress sigma' ({u.unit('stress')}, log scale)", y_axis_label="void ratio e")
    items = []
    for i, test_set in enumerate(dict.fromkeys(line.test_sets)):
        colour = SET_COLOURS[i % len(SET_COLOURS)]
        src = ColumnDataSource(sources[f"set {i}"])
        segs = p.segment(x0="sigma", y0="e0", x1="sigma", y1="e", source=src, color=colour, line_dash="dotted")
        start = p.scatter("sigma", "e0", source=src, size=8, line_color=colour, fill_color=None, marker="square")
        crit = p.scatter("sigma", "e", source=src, size=10, color=colour, marker="circle")
        items.append((f"{test_set or 'stages'}: start of shear (open) to critical state (filled)", [segs, start, crit]))
    sign = "-" if line.lambda_ >= 0 else "+"
    items.insert(0, (f"e_cs = {line.e_1kpa:.3f} {sign} {abs(line.lambda_):.4f} ln(sigma'/1 kPa), R^2 {line.fit.r2:.3f}",
                     [p.line("x", "y", source=ColumnDataSource(sources["line"]), color=GREY, line_width=2)]))
    fmt = "0.0" if u.is_si else "0"
    p.add_tools(HoverTool(tooltips=[("stage", "@stage"), ("sigma'", f"@sigma{{{fmt}}} {u.unit('stress')}"),
                                    ("e start", "@e0{0.000}"),
                                    ("e critical", "@e{0.000}")]))
    p.add_layout(Legend(items=items, location="top_right", label_text_font_size="9px"))
    return column(p)


def taylor_plot(results: Results, stage_ids: list[str], u: Display = SI) -> Plot:
    """tau/sigma' and Taylor's interlocking-free ratio tau/sigma' - dy/dx against displacement.

    Sources: per stage, "<stage>:ratio" and "<stage>:interlocking-free ratio" (decimated alike).
    """
    sources: Sources = {}
    for sid in stage_ids:
        s = results.stage(sid)
        c = s.reduced.curve[s.reduced.curve["in_shear"]]
        free = interlocking_free_ratio(c).to_numpy()
        keep = decimate(c["x_mm"].to_numpy(), [c["ratio"].to_numpy(), free])
        x = (c["x_mm"].to_numpy()[keep] * u.factor("length")).astype(np.float32)  # display only: float32 halves it
        sources[f"{sid}:ratio"] = {"x": x, "y": c["ratio"].to_numpy()[keep].astype(np.float32)}
        sources[f"{sid}:interlocking-free ratio"] = {"x": x, "y": free[keep].astype(np.float32)}
    return Plot(sources, functools.partial(_draw_taylor, stage_ids, u))


def taylor_figure(results: Results, stage_ids: list[str], u: Display = SI) -> Model:
    """Taylor's ratios of the stages ``stage_ids`` (:func:`taylor_plot`, drawn)."""
    return taylor_plot(results, stage_ids, u).figure()


def _draw_taylor(stage_ids: list[str], u: Display, sources: Sources) -> Model:
    p = _figure("stress ratio and Taylor's interlocking-free ratio", "taylor-" + "-".join(stage_ids),
                x_axis_label=u.label("horizontal displacement", "length"), y_axis_label="ratio")
    items = []
    for i, sid in enumerate(stage_ids):
        colour = SET_COLOURS[i % len(SET_COLOURS)]
        a = p.line("x", "y", source=ColumnDataSource(sources[f"{sid}:ratio"]), color=colour, line_width=1.5)
        b = p.line("x", "y", source=ColumnDataSource(sources[f"{sid}:interlocking-free ratio"]), color=colour,
                   line_width=1.5, line_dash="dashed")
        items.append((f"{sid}: tau/sigma' (solid), tau/sigma' - dy/dx (dashed)", [a, b]))
    p.add_layout(Legend(items=items, location="bottom_right", label_text_font_size="9px"))
    return column(p)
