"""Figures of the derived results: critical-state line and Taylor's ratio (bands: ``figures.envelope_figure``).

Display only: every number drawn comes from :mod:`kernels_helpers.derived` or the pure functions
it uses; curves are decimated as in :mod:`.figures`.
"""

from __future__ import annotations

import numpy as np
from bokeh.layouts import column
from bokeh.models import ColumnDataSource, HoverTool, Legend
from bokeh.plotting import figure

from ..critical_state import CriticalStateLine
from ..dilatancy import interlocking_free_ratio
from ..display_units import SI, Display
from ..results import Results
from .figures import CRIT, GREY, INK, PEAK, SUGGESTED, TOOLS, decimate

__all__ = ["critical_state_figure", "taylor_figure"]

SET_COLOURS = (INK, PEAK, CRIT, SUGGESTED, "#8c2d04", "#4d7c0f")


def _figure(title: str, name: str, **kw) -> figure:
    p = figure(title=title, height=380, width=560, tools=TOOLS, name=name, **kw)
    p.toolbar.logo = None
    p.title.text_font_size = "11px"
    return p


def critical_state_figure(results: Results, line: CriticalStateLine, u: Display = SI):
    """Void ratio against ln sigma': start of shear and critical state per stage, and the fitted line."""
    k = u.factor("stress")
    p = _figure(f"critical-state line - {line.group}", f"csl-{line.group}", x_axis_type="log",
                x_axis_label=f"normal stress sigma' ({u.unit('stress')}, log scale)", y_axis_label="void ratio e")
    items = []
    for i, test_set in enumerate(dict.fromkeys(line.test_sets)):
        colour = SET_COLOURS[i % len(SET_COLOURS)]
        idx = [j for j, t in enumerate(line.test_sets) if t == test_set]
        sig = [line.sigma_kpa[j] * k for j in idx]
        src = ColumnDataSource({"sigma": sig, "e": [line.e_cs[j] for j in idx], "e0": [line.e_start[j] for j in idx],
                                "stage": [line.stage_ids[j] for j in idx]})
        segs = p.segment(x0="sigma", y0="e0", x1="sigma", y1="e", source=src, color=colour, line_dash="dotted")
        start = p.scatter("sigma", "e0", source=src, size=8, line_color=colour, fill_color=None, marker="square")
        crit = p.scatter("sigma", "e", source=src, size=10, color=colour, marker="circle")
        items.append((f"{test_set or 'stages'}: start of shear (open) to critical state (filled)", [segs, start, crit]))
    lo, hi = min(line.sigma_kpa) / 1.5, max(line.sigma_kpa) * 1.5
    xs = np.geomspace(lo, hi, 30)
    sign = "-" if line.lambda_ >= 0 else "+"
    items.insert(0, (f"e_cs = {line.e_1kpa:.3f} {sign} {abs(line.lambda_):.4f} ln(sigma'/1 kPa), R^2 {line.fit.r2:.3f}",
                     [p.line(xs * k, [line.e_at(x) for x in xs], color=GREY, line_width=2)]))
    fmt = "0.0" if u.is_si else "0"
    p.add_tools(HoverTool(tooltips=[("stage", "@stage"), ("sigma'", f"@sigma{{{fmt}}} {u.unit('stress')}"),
                                    ("e start", "@e0{0.000}"),
                                    ("e critical", "@e{0.000}")]))
    p.add_layout(Legend(items=items, location="top_right", label_text_font_size="9px"))
    return column(p)


def taylor_figure(results: Results, stage_ids: list[str], u: Display = SI):
    """tau/sigma' and Taylor's interlocking-free ratio tau/sigma' - dy/dx against displacement."""
    p = _figure("stress ratio and Taylor's interlocking-free ratio", "taylor-" + "-".join(stage_ids),
                x_axis_label=u.label("horizontal displacement", "length"), y_axis_label="ratio")
    items = []
    for i, sid in enumerate(stage_ids):
        s = results.stage(sid)
        c = s.reduced.curve[s.reduced.curve["in_shear"]]
        free = interlocking_free_ratio(c).to_numpy()
        keep = decimate(c["x_mm"].to_numpy(), [c["ratio"].to_numpy(), free])
        x = (c["x_mm"].to_numpy()[keep] * u.factor("length")).astype(np.float32)  # display only: float32 halves it
        colour = SET_COLOURS[i % len(SET_COLOURS)]
        a = p.line(x, c["ratio"].to_numpy()[keep].astype(np.float32), color=colour, line_width=1.5)
        b = p.line(x, free[keep].astype(np.float32), color=colour, line_width=1.5, line_dash="dashed")
        items.append((f"{sid}: tau/sigma' (solid), tau/sigma' - dy/dx (dashed)", [a, b]))
    p.add_layout(Legend(items=items, location="bottom_right", label_text_font_size="9px"))
    return column(p)
