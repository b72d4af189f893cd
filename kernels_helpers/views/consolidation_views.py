"""Figures and table of the consolidation stage: both constructions drawn, so the engineer can judge them."""

from __future__ import annotations

import math

import numpy as np
from bokeh.layouts import gridplot
from bokeh.models import Span
from bokeh.plotting import figure

from ..consolidation import MM2_S_TO_M2_YR
from ..display_units import SI, Display
from ..results import Results, StageResult
from . import tables
from .figures import CRIT, INK, PEAK, SUGGESTED, TOOLS

__all__ = ["consolidation_figure", "rate_table"]


def _panel(title: str, x_label: str, name: str, x_axis_type: str = "linear", u: Display = SI) -> figure:
    p = figure(title=title, height=260, width=420, tools=TOOLS, name=name, x_axis_label=x_label,
               y_axis_label=u.label("settlement", "length"), x_axis_type=x_axis_type)
    p.y_range.flipped = True  # settlement downwards, as it is drawn by hand
    p.toolbar.logo = None
    p.title.text_font_size = "11px"
    return p


def consolidation_figure(s: StageResult, u: Display = SI):
    """Settlement against log time (Casagrande) and against root time (Taylor), constructions drawn."""
    c = s.consolidation
    assert c is not None
    ok = c.time_s > 0
    L = u.factor("length")
    t, d = c.time_s[ok], c.settlement_mm[ok] * L
    log = _panel(f"{s.stage_id}: consolidation - log time (Casagrande)", "time (s, log scale)",
                 f"consolidation-{s.stage_id}-log", "log", u)
    log.scatter(t, d, size=4, color=INK, legend_label="readings")
    cas = c.casagrande
    if cas is not None:
        lt = np.log10(t)
        span = np.array([lt[0], lt[-1]])
        log.line(10**span, (cas.tangent[0] + cas.tangent[1] * span) * L, color=PEAK, line_dash="dashed",
                 legend_label="tangent at the steepest point")
        log.line(10**span, (cas.secondary[0] + cas.secondary[1] * span) * L, color=SUGGESTED, line_dash="dashed",
                 legend_label="secondary branch")
        for level, label in ((cas.d0_mm, "d_0"), (cas.d50_mm, "d_50"), (cas.d100_mm, "d_100")):
            log.add_layout(Span(location=level * L, dimension="width", line_color=CRIT, line_dash="dotted"))
            log.text([t[0]], [level * L], text=[label], text_font_size="9px", text_color=CRIT)
        log.add_layout(Span(location=cas.t50_s, dimension="height", line_color=CRIT))
        log.scatter([cas.t50_s], [cas.d50_mm * L], size=9, color=CRIT, marker="diamond",
                    legend_label=f"t_50 = {cas.t50_s:.3g} s")
    root = _panel(f"{s.stage_id}: consolidation - root time (Taylor)", "sqrt(time) (s^0.5)",
                  f"consolidation-{s.stage_id}-root", u=u)
    r = np.sqrt(t)
    root.scatter(r, d, size=4, color=INK, legend_label="readings")
    tay = c.taylor
    if tay is not None:
        rr = np.array([0.0, min(r[-1], 2.0 * math.sqrt(tay.t90_s))])
        root.line(rr, (tay.d0_mm + tay.k_mm_per_sqrt_s * rr) * L, color=PEAK, line_dash="dashed",
                  legend_label="early line")
        root.line(rr, (tay.d0_mm + tay.k_mm_per_sqrt_s / 1.15 * rr) * L, color=SUGGESTED, line_dash="dashed",
                  legend_label="abscissae x 1.15")
        root.scatter([math.sqrt(tay.t90_s)], [tay.d90_mm * L], size=9, color=CRIT, marker="diamond",
                     legend_label=f"t_90 = {tay.t90_s:.3g} s")
        root.x_range.end = float(rr[-1]) * 1.05
    for p in (log, root):
        p.legend.location = "top_right"
        p.legend.label_text_font_size = "9px"
    return gridplot([[log, root]], toolbar_location="right", merge_tools=True)


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
