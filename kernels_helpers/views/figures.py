"""Static Bokeh figures of stages and envelopes (display only: curves decimated, numbers untouched).

Curves longer than :data:`DISPLAY_POINTS` are decimated for display with the
Largest-Triangle-Three-Buckets algorithm (``tsdownsample``); every computation uses all readings.
"""

from __future__ import annotations

import numpy as np
from bokeh.layouts import column, gridplot
from bokeh.models import BoxAnnotation, ColumnDataSource, HoverTool, Legend, Span
from bokeh.plotting import figure
from tsdownsample import LTTBDownsampler

from ..results import EnvelopeResult, Results, StageResult

__all__ = ["DISPLAY_POINTS", "decimate", "envelope_figure", "stage_figure"]

DISPLAY_POINTS = 1500
# Colours of our own: ink for curves, amber for peaks, teal for critical state, grey for excluded.
INK, PEAK, CRIT, GREY, SUGGESTED = "#1f3b57", "#d9822b", "#1b8a7a", "#a0a7ad", "#7a5195"
RESIDUAL = "#8c564b"
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


def _panel(title: str, y_label: str, name: str, x_range=None) -> figure:
    shared = {"x_range": x_range} if x_range is not None else {}
    p = figure(title=title, height=220, width=380, tools=TOOLS, name=name, x_axis_label="horizontal displacement (mm)",
               y_axis_label=y_label, **shared)
    p.toolbar.logo = None
    p.title.text_font_size = "11px"
    return p


def stage_figure(s: StageResult):
    """Shear stress, vertical displacement and void ratio against horizontal displacement."""
    c = s.reduced.curve
    shear = c[c["in_shear"]]
    x = shear["x_mm"].to_numpy()
    keep = decimate(x, [shear["tau_kpa"].to_numpy(), shear["y_mm"].to_numpy()])
    d = shear.iloc[keep]
    # float32 is ample for drawing (7 digits) and halves the record; the computation keeps float64
    src = ColumnDataSource({k: d[k].to_numpy(dtype=np.float32) for k in ("x_mm", "tau_kpa", "y_mm", "e", "dydx", "ratio")})
    label = f"{s.stage_id}: sigma'n {s.sigma_nominal_kpa:.0f} kPa" + ("" if s.included else " (excluded)")
    colour = INK if s.included else GREY
    tau = _panel(f"{label} - shear stress", "shear stress tau (kPa)", f"stage-{s.stage_id}-tau")
    vert = _panel("vertical displacement (dilation +)", "vertical displacement (mm)", f"stage-{s.stage_id}-y", tau.x_range)
    void = _panel("void ratio", "void ratio e", f"stage-{s.stage_id}-e", tau.x_range)
    items = {"readings": [tau.line("x_mm", "tau_kpa", source=src, color=colour, line_width=1.2)]}
    vert.line("x_mm", "y_mm", source=src, color=colour, line_width=1.2)
    void.line("x_mm", "e", source=src, color=colour, line_width=1.2)
    for p in (tau, vert, void):
        p.add_layout(BoxAnnotation(left=s.cs.x_from_mm, right=s.cs.x_to_mm, fill_color=CRIT, fill_alpha=0.12))
        p.add_tools(HoverTool(tooltips=[("x", "@x_mm{0.000} mm"), ("tau", "@tau_kpa{0.0} kPa"), ("y", "@y_mm{0.000} mm"),
                                        ("e", "@e{0.0000}"), ("dy/dx", "@dydx{+0.0000}")], mode="vline"))
    items["critical state (window mean)"] = [
        tau.line([s.cs.x_from_mm, s.cs.x_to_mm], [s.cs.tau_kpa] * 2, color=CRIT, line_width=3)
    ]
    if s.cs_source == "manual":
        sug = s.cs_suggested
        items["critical state suggested"] = [tau.line([sug.x_from_mm, sug.x_to_mm], [sug.tau_kpa] * 2, color=SUGGESTED,
                                                      line_width=2, line_dash="dashed")]
    if not (s.no_distinct_peak and s.peak_source == "suggested"):
        p = s.peak
        items["peak"] = [tau.scatter([p.x_mm], [p.tau_kpa], size=11, color=PEAK, marker="diamond")]
        vert.scatter([p.x_mm], [float(c["y_mm"].iloc[p.index])], size=9, color=PEAK, marker="diamond")
        void.scatter([p.x_mm], [p.e], size=9, color=PEAK, marker="diamond")
        vert.add_layout(Span(location=p.x_mm, dimension="height", line_color=PEAK, line_dash="dotted"))
    if s.peak_source == "manual":
        q = s.peak_suggested
        items["peak suggested"] = [tau.scatter([q.x_mm], [q.tau_kpa], size=10, line_color=SUGGESTED, fill_color=None,
                                               marker="diamond", line_width=2)]
    tau.add_layout(Legend(items=list(items.items()), location="bottom_right", label_text_font_size="9px"))
    return gridplot([[tau, vert, void]], toolbar_location="right", merge_tools=True)


def _line_points(fit, sigma_max: float) -> tuple[list[float], list[float]]:
    xs = [0.0, sigma_max * 1.1]
    return xs, [fit.intercept + fit.slope * v for v in xs]


def envelope_figure(results: Results, group: str):
    """tau against sigma' for one group: points (excluded greyed) and both envelopes."""
    p = figure(title=f"Mohr-Coulomb envelopes - {group}", height=380, width=560, tools=TOOLS, name=f"envelope-{group}",
               x_axis_label="normal stress sigma' (kPa)", y_axis_label="shear stress tau (kPa)")
    p.toolbar.logo = None
    members = {e.kind: e for e in results.envelopes if e.group == group}
    sigma_max = 1.0
    items = []
    styles = (("peak", PEAK, "triangle"), ("critical_state", CRIT, "circle"), ("residual", RESIDUAL, "square"))
    for kind, colour, marker in [st for st in styles if st[0] in members]:
        env: EnvelopeResult = members[kind]
        name = kind.replace("_", " ")
        src = ColumnDataSource({"sigma": list(env.sigma_kpa), "tau": list(env.tau_kpa), "stage": list(env.stage_ids)})
        r = p.scatter("sigma", "tau", source=src, size=10, color=colour, marker=marker)
        sigma_max = max([sigma_max, *src.data["sigma"]])
        out = [s for s in results.stages if (s.test_set == group or group.startswith("stratum")) and not s.included]
        if out and kind != "residual":
            gx = [(s.peak if kind == "peak" else s.cs) for s in out]
            items.append((f"{name} excluded", [p.scatter([q.sigma_kpa for q in gx], [q.tau_kpa for q in gx], size=9,
                                                          color=GREY, marker=marker, alpha=0.7)]))
        fit = env.chosen
        if fit is not None:
            xs, ys = _line_points(fit, sigma_max)
            c_txt = "0" if fit.through_origin else f"{fit.intercept + 0.0:.1f}".replace("-0.0", "0.0")
            line = p.line(xs, ys, color=colour, line_width=2)
            items.insert(0, (f"{name}: c' {c_txt} kPa, phi' {fit.phi_deg:.1f} deg", [r, line]))
        else:
            items.insert(0, (f"{name}: not fitted", [r]))
    p.add_tools(HoverTool(tooltips=[("stage", "@stage"), ("sigma'", "@sigma{0.0} kPa"), ("tau", "@tau{0.0} kPa")]))
    p.x_range.start = 0
    p.y_range.start = 0
    p.add_layout(Legend(items=items, location="top_left", label_text_font_size="10px"))
    return column(p)
