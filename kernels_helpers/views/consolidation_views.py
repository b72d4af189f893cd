"""Figures and table of the consolidation stage: both constructions drawn, so the engineer can judge them."""

from __future__ import annotations

import functools
import math

import numpy as np
from bokeh.model import Model
from bokeh.models import ColumnDataSource, GlyphRenderer, Legend, Line, Scatter, Span, Text
from bokeh.plotting import figure

from ..consolidation import MM2_S_TO_M2_YR
from ..display_units import SI, Display
from ..results import Results, StageResult
from . import tables
from .figures import CRIT, INK, PEAK, SUGGESTED, TOOLS, Plot, Sources, _draw, linked_row

__all__ = ["consolidation_figure", "consolidation_plot", "rate_table"]


def _panel(title: str, x_label: str, name: str, x_axis_type: str = "linear", u: Display = SI) -> figure:
    p = figure(title=title, height=260, width=420, tools=TOOLS, name=name, x_axis_label=x_label,
               y_axis_label=u.label("settlement", "length"), x_axis_type=x_axis_type, toolbar_location=None)
    p.y_range.flipped = True  # settlement downwards, as it is drawn by hand
    p.title.text_font_size = "11px"
    return p


def consolidation_plot(s: StageResult, u: Display = SI) -> Plot:
    """Settlement against log time (Casagrande) and against root time (Taylor), constructions drawn.

    Sources: on log time the readings, the tangent at the steepest point and the secondary branch, the
    labels d_0, d_50 and d_100 and t_50; on root time the readings, the early line, its abscissae x 1.15
    and t_90 (each construction only when it was made).
    """
    c = s.consolidation
    assert c is not None
    ok = c.time_s > 0
    L = u.factor("length")
    t, d = c.time_s[ok], c.settlement_mm[ok] * L
    sources: Sources = {"log:readings": {"x": t, "y": d}}
    cas = c.casagrande
    if cas is not None:
        lt = np.log10(t)
        span = np.array([lt[0], lt[-1]])
        sources["log:tangent"] = {"x": 10**span, "y": (cas.tangent[0] + cas.tangent[1] * span) * L}
        sources["log:secondary"] = {"x": 10**span, "y": (cas.secondary[0] + cas.secondary[1] * span) * L}
        for level, label in ((cas.d0_mm, "d_0"), (cas.d50_mm, "d_50"), (cas.d100_mm, "d_100")):
            sources[f"log:{label}"] = {"x": [t[0]], "y": [level * L], "text": [label]}
        sources["log:t_50"] = {"x": [cas.t50_s], "y": [cas.d50_mm * L]}
    r = np.sqrt(t)
    sources["root:readings"] = {"x": r, "y": d}
    tay = c.taylor
    if tay is not None:
        rr = np.array([0.0, min(r[-1], 2.0 * math.sqrt(tay.t90_s))])
        sources["root:early line"] = {"x": rr, "y": (tay.d0_mm + tay.k_mm_per_sqrt_s * rr) * L}
        sources["root:x 1.15"] = {"x": rr, "y": (tay.d0_mm + tay.k_mm_per_sqrt_s / 1.15 * rr) * L}
        sources["root:t_90"] = {"x": [math.sqrt(tay.t90_s)], "y": [tay.d90_mm * L]}
    return Plot(sources, functools.partial(_draw_consolidation, s, u))


def consolidation_figure(s: StageResult, u: Display = SI) -> Model:
    """The stage's consolidation plots side by side (:func:`consolidation_plot`, drawn)."""
    return consolidation_plot(s, u).figure()


def _draw_consolidation(s: StageResult, u: Display, sources: Sources) -> Model:
    """Each glyph drawn without the selection and mute variants (as the stage plots: nothing here selects or
    mutes); the two plots under one toolbar."""
    c = s.consolidation
    assert c is not None
    cas, tay = c.casagrande, c.taylor
    log = _panel(f"{s.stage_id}: consolidation - log time (Casagrande)", "time (s, log scale)",
                 f"consolidation-{s.stage_id}-log", "log", u)
    root = _panel(f"{s.stage_id}: consolidation - root time (Taylor)", "sqrt(time) (s^0.5)",
                  f"consolidation-{s.stage_id}-root", u=u)
    items: dict[str, list[tuple[str, list[GlyphRenderer]]]] = {"log": [], "root": []}
    for role, columns in sources.items():
        where, _, what = role.partition(":")
        p, src = (log if where == "log" else root), ColumnDataSource(columns)
        if what == "readings":
            label, glyph = "readings", Scatter(x="x", y="y", size=4, fill_color=INK, line_color=INK)
        elif what in ("tangent", "early line"):
            label = "tangent at the steepest point" if what == "tangent" else "early line"
            glyph = Line(x="x", y="y", line_color=PEAK, line_dash="dashed")
        elif what in ("secondary", "x 1.15"):
            label = "secondary branch" if what == "secondary" else "abscissae x 1.15"
            glyph = Line(x="x", y="y", line_color=SUGGESTED, line_dash="dashed")
        elif what in ("d_0", "d_50", "d_100"):
            p.add_layout(Span(location=columns["y"][0], dimension="width", line_color=CRIT, line_dash="dotted"))
            _draw(p, Text(x="x", y="y", text="text", text_font_size="9px", text_color=CRIT), src)
            continue
        elif what == "t_50":
            assert cas is not None
            log.add_layout(Span(location=cas.t50_s, dimension="height", line_color=CRIT))
            label = f"t_50 = {cas.t50_s:.3g} s"
            glyph = Scatter(x="x", y="y", size=9, fill_color=CRIT, line_color=CRIT, marker="diamond")
        else:
            assert what == "t_90" and tay is not None
            label = f"t_90 = {tay.t90_s:.3g} s"
            glyph = Scatter(x="x", y="y", size=9, fill_color=CRIT, line_color=CRIT, marker="diamond")
            root.x_range.end = float(sources["root:early line"]["x"][-1]) * 1.05
        items[where].append((label, [_draw(p, glyph, src)]))
    for p, where in ((log, "log"), (root, "root")):
        p.add_layout(Legend(items=items[where], location="top_right", label_text_font_size="9px"))
    return linked_row([log, root])


def rate_table(results: Results, u: Display = SI) -> str:
    """c_v by both constructions and the drained-rate check, per stage with a consolidation stage."""
    rows = []
    for s in results.stages:
        c, k = s.consolidation, s.rate
        if c is None:
            continue
        cv_c = "&ndash;" if c.casagrande is None else u.fmt("cv", c.casagrande.cv_mm2_s * MM2_S_TO_M2_YR, 2)
        cv_t = "&ndash;" if c.taylor is None else u.fmt("cv", c.taylor.cv_mm2_s * MM2_S_TO_M2_YR, 2)
        if k is None:
            rows.append([tables.esc(s.stage_id), cv_c, cv_t] + ["&ndash;"] * 5)
            continue
        verdict = '<span class="sb-flag">too fast for drained conditions</span>' if k.too_fast else "drained"
        rows.append([tables.esc(s.stage_id), cv_c, cv_t, tables.esc(k.rule), tables.num(k.required_s / 60, 1),
                     tables.num(k.time_to_failure_s / 60, 1),
                     f"{u.value('rate', k.rate_mm_min):.3g} / {u.value('rate', k.max_rate_mm_min):.3g}", verdict])
    return tables.table(("stage", u.label("c_v log time", "cv"), u.label("c_v root time", "cv"), "governing rule",
                         "required t_f (min)", "time to failure (min)", u.label("rate / maximum", "rate"), "check"),
                        rows)
