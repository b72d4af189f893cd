"""HTML tables of a project and its results, for the notebook and the record.

Every piece of user text (names, notes, reasons, file names) goes through :func:`html.escape`:
a record can never run script from its data. Numbers are formatted here, once, for display only.
"""

from __future__ import annotations

import html
import math
from collections.abc import Iterable, Sequence
from typing import Any

from ..decisions import SignOff
from ..display_units import SI, Display
from ..project import Project
from ..results import EnvelopeResult, Results, StageResult
from ..signatures import Check

__all__ = [
    "CAUTION",
    "caution_html",
    "envelope_table",
    "flags_table",
    "header_html",
    "inputs_table",
    "picks_table",
    "provenance_table",
    "residual_table",
    "sensitivity_table",
    "signoff_table",
    "specimen_table",
]

CAUTION = (
    "Strength parameters from a few laboratory specimens are not design values by themselves. "
    "Their use in design (slopes, walls, foundations) needs a cautious characteristic value, the "
    "partial factors of the governing code and National Annex, consideration of site variability, "
    "and the review and signature of a licensed geotechnical engineer. Shearbook does not replace "
    "that judgement."
)


def esc(value: Any) -> str:
    """Text for HTML: escaped, quotes included."""
    return html.escape(str(value), quote=True)


def num(value: float | None, digits: int = 1) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "&ndash;"
    text = f"{value:.{digits}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text  # never "-0.0"


def table(headers: Sequence[str], rows: Iterable[Sequence[str]], css: str = "sb-table") -> str:
    """An HTML table; ``headers`` are escaped, cells are expected to be escaped already."""
    head = "".join(f"<th>{esc(h)}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in r) + "</tr>" for r in rows)
    return f'<table class="{css}"><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


STYLE = """<style>
.sb-table {border-collapse: collapse; font-size: 12px; margin: 4px 0 12px 0;}
.sb-table th {background: #e9eef2; text-align: left !important; padding: 3px 8px; border-bottom: 1px solid #9aa7b1;}
.sb-table td {padding: 2px 8px; border-bottom: 1px solid #dde3e8; vertical-align: top; text-align: left !important;}
.sb-table td.sb-mono {font-family: monospace; font-size: 11px;}
.sb-excluded td {color: #8a8f94;}
.sb-caution {border-left: 4px solid #b5651d; background: #fbf3ea; padding: 6px 10px; font-size: 13px;}
.sb-flag {color: #8c2d04;}
.sb-first-page h1 {font-size: 22px; margin-top: 4px;}
.sb-mono {font-family: monospace; font-size: 11px; word-break: break-all;}
@page {margin: 14mm 11mm 16mm 11mm;
  @bottom-right {content: "page " counter(page) " of " counter(pages); font: 8pt sans-serif; color: #444;}}
@page wide {size: landscape;}
@media print {
  body, .jp-Notebook {font-size: 9pt; background: #fff;}
  .jp-Cell, .jp-Cell-outputWrapper, .jp-OutputArea, .jp-OutputArea-child, .jp-OutputArea-output {
    display: block !important; padding: 0 !important; margin: 0 !important; overflow: visible !important;}
  .jp-OutputArea-child {break-inside: auto !important;}  /* the lab template keeps a whole output on one page */
  .jp-OutputPrompt, .jp-InputPrompt, .jp-Collapser {display: none !important;}
  .sb-first-page {break-after: page;}
  .jp-OutputArea-child:has(.sb-stage) {break-before: page;}
  .jp-Cell:has([data-sb-section=picks]), .jp-Cell:has([data-sb-section=dilatancy]),
  .jp-Cell:has([data-sb-section=statistics]) {page: wide;}
  .sb-table {font-size: 7.5pt; width: 100%; table-layout: auto; border-collapse: collapse;}
  .sb-table thead {display: table-header-group;}
  .sb-table tr {break-inside: avoid;}
  .sb-table td, .sb-table th {padding: 1px 4px; overflow-wrap: break-word;}
  .sb-first-page .sb-table td:first-child {width: 16%;}
  h1, h2, h3 {break-after: avoid;}
  .jp-OutputArea-output:has(> div[data-root-id]) {zoom: 0.6; break-inside: avoid;}
  .bk-toolbar, .bk-Toolbar {display: none !important;}
  .sb-caution {break-inside: avoid;}
}
</style>"""


def header_html(results: Results, u: Display = SI) -> str:
    p = results.project
    rows = [
        (esc(k.replace("_", " ")), esc(p[k]))
        for k in ("name", "site", "client", "laboratory", "reference", "description")
        if p.get(k)
    ]
    if p.get("invented_data"):
        rows.append(("data", "<b>invented example data (demonstration only)</b>"))
    conv = results.conventions
    rows.append(("stresses on", esc(f"{conv['area']} area (ASTM D3080 sec. 5.6: tau/sigma does not depend on it)")))
    rows.append(("vertical displacement", esc(conv["vertical_displacement"])))
    rows.append(("horizontal displacement", esc(conv["horizontal_displacement"])))
    rows.append(("display units", esc(u.name) + (" (stored values and the embedded results are SI)" if not u.is_si
                                                 else "")))
    return STYLE + table(("field", "value"), rows)


def inputs_table(results: Results, project: Project) -> str:
    """Each raw file with its size, SHA-256 and the column map used to read it."""
    rows = []
    for s, spec in zip(results.stages, project.stages, strict=True):
        cmap = "<br>".join(
            esc(f"{q}: '{c.column}' [{c.unit}]" + ("" if c.dilation_positive else ", reads down on dilation: flipped"))
            for q, c in spec.columns.items()
        )
        rows.append((esc(s.stage_id), esc(s.relpath), f"{s.size_bytes:,}", f'<span class="sb-mono">{s.sha256}</span>',
                     cmap))
    return table(("stage", "file", "bytes", "SHA-256", "column map (unit in file)"), rows)


SETTLEMENT_SOURCE = {"declared": "project file", "consolidation readings": "end of the consolidation readings",
                     "none": "none given (height before consolidation)"}


def specimen_table(results: Results, project: Project, u: Display = SI) -> str:
    rows = []
    for s, spec in zip(results.stages, project.stages, strict=True):
        sp, r = spec.specimen, s.reduced
        size = f"{sp.shape} {u.fmt('length', sp.width_mm, 1)} {u.unit('length')}"
        rows.append((
            esc(s.stage_id), esc(spec.test_set), esc(size), u.fmt("length", sp.height_mm, 2), num(sp.dry_mass_g, 1),
            num(sp.gs, 2), esc(spec.normal_load.given_as), u.fmt("force", r.normal_force_n, 1),
            u.fmt("stress", s.sigma_nominal_kpa, 1), num(r.e_initial, 3), u.fmt("length", r.settlement_mm, 3),
            esc(SETTLEMENT_SOURCE[r.settlement_source]), u.fmt("length", r.height_start_mm, 3), num(r.e_start, 3),
            u.fmt("length", r.seating_shift_mm, 3),
        ))
    return table(
        ("stage", "test set", "box", u.label("H0", "length"), "Ms (g)", "Gs", "normal load given as",
         u.label("N", "force"), u.label("sigma'n nominal", "stress"), "e0", u.label("consol. settlement", "length"),
         "settlement from", u.label("H at start of shear", "length"), "e at start of shear",
         u.label("seating slack removed", "length")),
        rows,
    )


def method_html(results: Results, u: Display = SI) -> str:
    """The rules behind the suggestions and flags, with the thresholds this interpretation used."""
    p = results.settings["picks"]
    sources = sorted({SETTLEMENT_SOURCE[s.reduced.settlement_source] for s in results.stages})
    items = [
        "Void ratio: e = (H - H_s)/H_s, H_s = M_s/(G_s rho_w A_0); shearing starts from H_0 less the consolidation "
        "settlement, taken from the project file where it is declared, else from the end of the consolidation "
        f"readings (here: {', '.join(sources)}); a declared value that disagrees with the readings is flagged.",
        f"Peak: the maximum of the lightly smoothed shear stress ({p['peak_rule']}); distinct when it exceeds the "
        f"critical state by at least {p['distinct_peak_margin'] * 100:g} % (distinct_peak_margin). A record that "
        "stops a short way past a clear peak keeps it when the curve falls after it by that margin; its critical "
        "state is then 'not reached'.",
        f"Critical state: the mean over the last {p['cs_window_mm']:g} mm of travel (cs_window_mm); reached when "
        f"the mean rate of dilation is within {p['cs_rate_tolerance']:g} of zero (cs_rate_tolerance) and the "
        f"stress ratio changes by less than {p['cs_trend_tolerance'] * 100:g} % across the window "
        "(cs_trend_tolerance).",
        "Critical state not reached: such a stage is left out of the critical-state envelope and line unless the "
        "engineer put it back in with a stated reason (shown beside the stage).",
        "Transducers: a stuck, jumping or motionless channel is flagged with its lines; what depends on it "
        "(e.g. the void ratio and the rate of dilation for the vertical gauge) is marked unreliable.",
        "Untidy readings: blank or non-numeric rows and repeated times are left out with a flag naming the first "
        "lines (csv.untidy_rows = \"refuse\" refuses them).",
        f"Outliers: a stage whose strength lies outside the {results.settings['fit']['outlier_level'] * 100:g} % "
        "prediction interval of its envelope fitted without it is flagged (outlier_level), with phi' and c' with and "
        "without it; it is never left out automatically.",
    ]
    sparse = [s.stage_id for s in results.stages if s.reduced.sparse]
    if sparse:
        items.append(f"Readings far apart (a hand-logged sheet: fewer than four readings in "
                     f"{results.settings['reduction']['peak_smoothing_mm']:g} mm; here {', '.join(sparse)}): kept as "
                     "read, with no spike filter and no smoothing; the peak is the highest reading and every pick is "
                     "at a reading; dy/dx is taken between neighbouring readings (central differences).")
    return "<ul>" + "".join(f"<li>{esc(u.annotate(i))}</li>" for i in items) + "</ul>"


def _pick_cells(s: StageResult, u: Display = SI) -> list[str]:
    p, ps = s.peak.chosen, s.peak.suggested
    if s.no_distinct_peak and s.peak.source == "suggested":
        peak = ["no distinct peak (see flags)"] + ["&ndash;"] * 3
    else:
        peak = [u.fmt("length", p.x_mm, 2), u.fmt("stress", p.tau_kpa, 1), u.fmt("stress", p.sigma_kpa, 1),
                num(math.degrees(math.atan(p.ratio)), 1)]
    peak_src = esc(s.peak.source) + (
        f" (suggested at {u.with_unit('length', ps.x_mm, 2)}, {u.with_unit('stress', ps.tau_kpa, 1)})"
        if s.peak.source == "manual" else ""
    )
    c, cs = s.critical_state.chosen, s.critical_state.suggested
    cs_src = esc(s.critical_state.source) + (
        f" (suggested {u.fmt('length', cs.x_from_mm, 2)}-{u.with_unit('length', cs.x_to_mm, 2)}, "
        f"{u.with_unit('stress', cs.tau_kpa, 1)})"
        if s.critical_state.source == "manual" else "") + (
        "; not reached: left out of the critical-state fit" if s.critical_state_left_out else "") + (
        f"; not reached, used in the fit: {esc(s.critical_state_reason)}" if s.critical_state_used else ""
    )
    return [
        peak_src, *peak,
        cs_src, f"{u.fmt('length', c.x_from_mm, 2)}&ndash;{u.fmt('length', c.x_to_mm, 2)}",
        u.fmt("stress", c.tau_kpa, 1), u.fmt("stress", c.tau_sd_kpa, 2),
        u.fmt("stress", c.sigma_kpa, 1), num(math.degrees(math.atan(c.ratio)), 1), f"{c.dydx:+.4f}", num(c.e, 3),
    ]


def picks_table(results: Results, u: Display = SI) -> str:
    """Peak and critical-state picks per stage, the suggestion beside any manual value."""
    rows = []
    for s in results.stages:
        inc = "yes" if s.included else f"<b>excluded</b>: {esc(s.exclusion_reason)}"
        notes = "; ".join(esc(n) for n in (s.note, s.peak.note, s.critical_state.note) if n)
        rows.append([esc(s.stage_id), u.fmt("stress", s.sigma_nominal_kpa, 0), inc, *_pick_cells(s, u), notes])
    L, S = u.unit("length"), u.unit("stress")
    headers = (
        "stage", f"sigma'n ({S})", "included", "peak pick", f"x ({L})", f"tau ({S})", f"sigma' ({S})",
        "phi' secant (deg)", "critical-state pick", f"window ({L})", f"tau mean ({S})", f"tau s.d. ({S})",
        f"sigma' ({S})", "phi' secant (deg)", "dy/dx mean", "e", "notes",
    )
    return table(headers, rows)


def _fit_row(e: EnvelopeResult, which: str, u: Display = SI) -> list[str]:
    fit = e.free if which == "free" else e.origin
    label = "c' free" if which == "free" else "through origin (c' = 0)"
    chosen = " (reported)" if e.reported == which else ""
    if fit is None:
        return ([esc(e.group), esc(e.kind.replace("_", " ")), esc(label), str(len(e.stage_ids))] + ["&ndash;"] * 5
                + [esc(e.not_fitted or "")])
    lo, hi = fit.phi_interval_deg
    c_lo, c_hi = fit.c_interval_kpa
    c = "0 (fixed)" if fit.through_origin else (
        f"{u.fmt('stress', fit.intercept, 1)} [{u.fmt('stress', c_lo, 1)}, {u.fmt('stress', c_hi, 1)}]")
    warn = '<span class="sb-flag">negative c\' : consider c\' = 0</span>' if fit.negative_cohesion else ""
    return [
        esc(e.group), esc(e.kind.replace("_", " ")), esc(label + chosen), str(fit.n),
        f"{fit.phi_deg:.1f} [{lo:.1f}, {hi:.1f}]", c, f"{fit.r2:.4f}", u.fmt("stress", fit.residual_sd, 2),
        ", ".join(("+" if r >= 0 else "") + u.fmt("stress", r, 2) for r in fit.residuals), warn,
    ]


def envelope_table(results: Results, u: Display = SI) -> str:
    """c' and phi' with their 95 % intervals for every envelope, both fits."""
    rows = [_fit_row(e, w, u) for e in results.envelopes for w in ("free", "origin")]
    level = results.envelopes[0].free.level if results.envelopes and results.envelopes[0].free else 0.95
    pct = f"{level * 100:g} %"
    S = u.unit("stress")
    return table(
        ("group", "envelope", "fit", "n", f"phi' (deg) [{pct} CI]", f"c' ({S}) [{pct} CI]", "R^2", f"s ({S})",
         f"residuals ({S})", "remarks"),
        rows,
    )


def residual_table(results: Results, u: Display = SI) -> str:
    """Reversal tests: the stress at the end of every pass, and the residual strength."""
    rows = []
    for s in results.stages:
        if s.residual is None:
            continue
        passes = "<br>".join(f"pass {p.pass_no} ({'forward' if p.forward else 'back'}, "
                             f"{u.with_unit('length', p.travel_mm, 1)}): "
                             f"{u.with_unit('stress', p.tau_kpa, 1)}, tau/sigma {p.ratio:.3f}" for p in s.passes)
        r = s.residual.chosen
        value = (f"{u.with_unit('stress', r.tau_kpa, 1)} at {u.with_unit('stress', r.sigma_kpa, 1)}"
                 if r.tau_kpa is not None else "&ndash;")
        rows.append((esc(s.stage_id), passes, value, esc(u.annotate(r.message))))
    if not rows:
        return ""
    return table(("stage", "end of each pass", "residual", "rule"), rows)


def sensitivity_table(results: Results, u: Display = SI) -> str:
    """Leave-one-out: every envelope refitted without each of its stages in turn."""
    def change(v: float | None, digits: int) -> str:
        return "&ndash;" if v is None else f"{v:+.{digits}f}"

    def c_change(v: float | None) -> str:
        return "&ndash;" if v is None else ("+" if v >= 0 else "") + u.fmt("stress", v, 2)

    rows = [
        (esc(r.group), esc(r.kind.replace("_", " ")), esc(r.left_out), str(r.n_left), num(r.phi_deg, 1),
         change(r.phi_change_deg, 2), u.fmt("stress", r.c_kpa, 1), c_change(r.c_change_kpa),
         num(r.phi_origin_deg, 1), change(r.phi_origin_change_deg, 2), esc(r.method))
        for r in results.sensitivity
    ]
    return table(("group", "envelope", "stage left out", "n left", "phi' (deg)", "change",
                  u.label("c'", "stress"), "change", "phi' c'=0 (deg)", "change", "how"), rows)


def flags_table(results: Results, u: Display = SI) -> str:
    rows = [(esc(s.stage_id), f'<span class="sb-flag">{esc(u.annotate(f))}</span>')
            for s in results.stages for f in s.flags]
    rows += [(esc(s.stage_id), esc(u.annotate(s.no_distinct_peak))) for s in results.stages if s.no_distinct_peak]
    if not rows:
        return "<p>No flags raised.</p>"
    return table(("stage", "flag"), rows)


SIGNOFF_STATES = {"draft": "DRAFT - not checked", "checked": "checked, not yet approved", "approved": "approved"}


def _signature_cell(check: Check | None) -> str:
    if check is None or check.status == "unsigned":
        return "unsigned (a name only)"
    css = ' class="sb-flag"' if check.status in ("invalid", "unknown key") else ""
    return f"<span{css}><b>{esc(check.status)}</b>: {esc(check.detail)}</span>"


def signoff_table(signoff: SignOff, checks: Sequence[Check | None] = ()) -> str:
    """The sign-off state and every step of it: who, when, with what remark, and its signature's check."""
    checks = list(checks) + [None] * (len(signoff.history) - len(checks))
    rows = [(esc(h.get("state", "")), esc(h.get("who", "")), esc(h.get("time_utc", "")), esc(h.get("note", "")),
             _signature_cell(c) if h.get("state") != "draft" else "&ndash;")
            for h, c in zip(signoff.history, checks, strict=True)]
    head = f'<p>Sign-off state: <b>{esc(SIGNOFF_STATES[signoff.state])}</b></p>'
    return head + (table(("step", "who", "when (UTC)", "remark", "signature"), rows) if rows
                   else "<p>No sign-off recorded.</p>") + (
        "<p>A signature is checked here against this record's own raw-file hashes, interpretation and results; "
        "whether its key belongs to an allowed signer is checked by <code>shearbook verify RECORD "
        "--allowed-signers FILE</code>.</p>" if any(c is not None and c.status != "unsigned" for c in checks) else "")


def provenance_table(results: Results, made_utc: str, interpretation_path: str, extra_versions: dict[str, str]) -> str:
    p = results.provenance
    rows = [("made (UTC)", esc(made_utc)), ("interpretation file", esc(interpretation_path)),
            ("interpretation SHA-256", f'<span class="sb-mono">{esc(p["interpretation_sha256"])}</span>')]
    rows += [(esc(f"version of {k}"), esc(v)) for k, v in {**p["versions"], **extra_versions}.items()]
    rows += [("Python", esc(p["python"])), ("platform", esc(p["platform"]))]
    return table(("item", "value"), rows)


def caution_html() -> str:
    return f'<div class="sb-caution"><b>Caution.</b> {esc(CAUTION)}</div>'


def stage_heading(s: StageResult, u: Display = SI) -> str:
    """The heading above a stage's plots: stage, test set and normal stress (a new page in print)."""
    where = f", {esc(s.test_set)}" if s.test_set else ""
    left = " (excluded)" if not s.included else ""
    return (f'<h3 class="sb-stage">Stage {esc(s.stage_id)}{where}, sigma\'n '
            f"{u.with_unit('stress', s.sigma_nominal_kpa, 0)}{left}</h3>")


def apparatus_html(results: Results, project: Project, u: Display = SI) -> str:
    """The calibrations the readings were converted with, and each stage's apparatus corrections at its peak."""
    cals = {c.calibration.name: c.calibration for s in project.stages for c in s.columns.values() if c.calibration}
    for s in project.stages:
        if s.apparatus is not None:
            cals.update({c.name: c for c in (s.apparatus.box_friction, s.apparatus.vertical_compliance) if c})
    rows = [(esc(s.stage_id), esc(c.name), esc(c.method), f"{c.at_peak:.4g} {esc(c.unit)}",
             f"{c.measured_at_peak:.4g} {esc(c.unit)}",
             ("&ndash;" if c.share is None else f"{c.share * 100:.1f} %")
             + (' <span class="sb-flag">above the stated share</span>' if c.flagged else ""),
             f"{c.limit * 100:g} %") for s in results.stages for c in s.corrections]
    if not cals and not rows:
        return ""
    out = "<h3>Calibrations and apparatus corrections</h3>"
    if cals:
        out += table(("calibration", "kind, units, range, source and date"),
                     [(esc(n), esc(c.describe())) for n, c in sorted(cals.items())])
    if rows:
        out += table(("stage", "correction", "how", "size at the peak", "value it corrects (measured)", "share",
                      "flagged above"), rows)
        out += ("<p>Corrections are applied to the readings before reduction; the raw files are unchanged. "
                "Values are in SI (N, mm) as the calibrations give them.</p>")
    return out
