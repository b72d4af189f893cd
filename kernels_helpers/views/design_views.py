"""Tables and notebook display of the derived results: envelope statistics and curvature, sets
against their pooled envelope, critical-state lines, stress-dilatancy aids, and the characteristic
and design values with their method and cautions.

All user text (group, set and stage names, notes, reasons) is escaped with :func:`.tables.esc`.
"""

from __future__ import annotations

from collections.abc import Sequence

from ..compare import overlaps_pooled
from ..design import PARTIAL_FACTOR_SETS
from ..dilatancy import DAVIS_JEWELL_ASSUMPTIONS
from ..display_units import SI, Display
from ..results import Results
from .tables import esc, num, table

__all__ = [
    "critical_state_table",
    "design_caution_html",
    "design_html",
    "dilatancy_table",
    "power_law_angle_table",
    "set_comparison_table",
    "statistics_table",
]


def _kind(kind: str) -> str:
    return esc(kind.replace("_", " "))


def statistics_table(results: Results, u: Display = SI) -> str:
    """Per envelope: secant angle per stage, the power law with secant/tangent angles, residuals side by side."""
    dash = "&ndash;"
    rows = []
    for st in results.envelope_statistics:
        if not st.stage_ids:
            continue
        pw, cv = st.power, st.curvature
        law = dash if pw is None else f"a {pw.a:.4g} (SE {num(pw.a_se, 3)}), b {pw.b:.4f} (SE {num(pw.b_se, 4)})"
        remark = cv.statement if cv else (st.power_not_fitted or "")
        sigma = results.envelope(st.group, st.kind).sigma_kpa
        for i, sid in enumerate(st.stage_ids):
            rows.append((
                esc(st.group), _kind(st.kind), esc(sid), u.fmt("stress", sigma[i], 1), num(st.secant_phi_deg[i], 1),
                num(st.power_phi_secant_deg[i], 1) if pw else dash, num(st.power_phi_tangent_deg[i], 1) if pw else dash,
                _signed(u, cv.line_residuals[i]) if cv else dash, _signed(u, cv.power_residuals[i]) if cv else dash,
                law if i == 0 else "", esc(u.annotate(remark)) if i == 0 else "",
            ))
    return table(("group", "envelope", "stage", u.label("sigma'", "stress"), "phi' secant (deg)",
                  "power law phi' secant (deg)", "power law phi' tangent (deg)",
                  u.label("straight-line residual", "stress"), u.label("power-law residual", "stress"),
                  "power law tau = a sigma'^b (fitted in kPa)", "curvature"), rows)


def _signed(u: Display, value: float) -> str:
    return ("+" if value >= 0 else "") + u.fmt("stress", value, 2)


def power_law_angle_table(results: Results, stresses_kpa: Sequence[float] | None = None, u: Display = SI) -> str:
    """Power-law secant and tangent angles at the stresses named (default: ends and middle of the design range)."""
    if stresses_kpa is None:
        rng = results.design.stress_range_kpa if results.design is not None else None
        if not rng:
            return ""
        stresses_kpa = (rng[0], (rng[0] + rng[1]) / 2, rng[1])
    stresses = tuple(float(s) for s in stresses_kpa)
    rows = []
    for st in results.envelope_statistics:
        if st.power is None:
            continue
        pw = st.power
        cells = [f"{float(pw.phi_secant_deg(s)):.1f} / {float(pw.phi_tangent_deg(s)):.1f}" for s in stresses]
        rows.append((esc(st.group), _kind(st.kind), *cells))
    heads = ("group", "envelope",
             *(f"secant / tangent phi' at {s:g} kPa" + ("" if u.is_si else f" [{u.with_unit('stress', s)}]")
               + " (deg)" for s in stresses))
    return "<p>Power-law secant and tangent friction angles at the stresses named:</p>" + table(heads, rows)


def set_comparison_table(results: Results, u: Display = SI) -> str:
    """Each test set's phi' (and c') with its interval beside the pooled envelope, and the F-test statement."""
    if not results.set_comparisons:
        return "<p>No stratum holds more than one test set: nothing to compare.</p>"
    rows = []
    for cmp in results.set_comparisons:
        named = [(n, f) for n, f in zip(cmp.sets, cmp.fits, strict=True)]
        if cmp.pooled is not None:
            named.append(("pooled (these sets)", cmp.pooled))
        for name, f in named:
            lo, hi = f.phi_interval_deg
            c_lo, c_hi = f.c_interval_kpa
            c = "0 (fixed)" if f.through_origin else (
                f"{u.fmt('stress', f.intercept, 1)} [{u.fmt('stress', c_lo, 1)}, {u.fmt('stress', c_hi, 1)}]")
            overlap = ""
            if cmp.pooled is not None and f is not cmp.pooled:
                inside = overlaps_pooled(f, cmp.pooled)
                overlap = "overlaps pooled" if inside else '<span class="sb-flag">outside pooled</span>'
            rows.append((esc(cmp.group), _kind(cmp.kind), esc(name), str(f.n), f"{f.phi_deg:.1f} [{lo:.1f}, {hi:.1f}]",
                         c, overlap))
        rows.append((esc(cmp.group), _kind(cmp.kind), "<b>test</b>", "", "", "",
                     esc(u.annotate(cmp.statement)) + "".join(f"<br>{esc(u.annotate(x))}" for x in cmp.left_out)))
    method = esc(results.set_comparisons[0].method)
    heads = ("group", "envelope", "set", "n", "phi' (deg) [95 % CI]", f"c' ({u.unit('stress')}) [95 % CI]",
             "comparison")
    return table(heads, rows) + f"<p>Method: {method}. Interval overlap is a visual aid, not a test.</p>"


def _by_set(line) -> str:
    """Mean residual of e per test set: dense and loose on one line give means near zero, of mixed sign."""
    sets: dict[str, list[float]] = {}
    for t, r in zip(line.test_sets, line.fit.residuals, strict=True):
        sets.setdefault(t, []).append(r)
    return ", ".join(f"{esc(t or 'stages')} {sum(v) / len(v):+.3f}" for t, v in sets.items())


def critical_state_table(results: Results, u: Display = SI) -> str:
    rows = []
    for line in results.critical_state_lines:
        f = line.fit
        rows.append((esc(line.group), str(f.n), f"{line.lambda_:.4f} (SE {f.slope_se:.4f})",
                     f"{line.e_1kpa:.3f} (SE {f.intercept_se:.3f})", f"{line.e_at(100.0):.3f}", f"{f.r2:.3f}",
                     ", ".join(f"{esc(i)} {r:+.3f}" for i, r in zip(line.stage_ids, f.residuals, strict=True)),
                     _by_set(line)))
    if not rows:
        return "<p>No group has three or more critical-state values: no critical-state line.</p>"
    return table(("group", "n", "lambda (slope of e on ln sigma')", u.annotate("e at 1 kPa"),
                  u.annotate("e at 100 kPa"), "R^2", "residuals of e", "mean residual by test set"), rows) + (
        "<p>e_cs = e_1 - lambda ln(sigma'/1 kPa), least squares (n - 2 dof). In the shear box the normal stress "
        "stands in for p': these are box values, not triaxial ones. The void ratio is a specimen average; the "
        "shear zone may differ.</p>")


def dilatancy_table(results: Results) -> str:
    rows = []
    for d in results.dilatancy:
        b = d.bolton
        bolton = ["&ndash;"] * 4 if b is None else [
            f"{b.relative_density:.2f}", f"{b.i_r:.2f}", num(b.dphi_plane_strain_deg), num(b.dphi_triaxial_deg)]
        rows.append((
            esc(d.stage_id), num(d.phi_peak_ds_deg), num(d.psi_peak_deg), num(d.taylor_peak_deg), num(d.phi_cs_ds_deg),
            num(d.measured_dphi_ds_deg), num(d.phi_peak_ps_deg), num(d.phi_cs_ps_deg), num(d.measured_dphi_ps_deg),
            *bolton, esc(d.note),
        ))
    return table(("stage", "phi' peak ds (deg)", "psi at peak atan(dy/dx) (deg)", "Taylor at peak (deg)",
                  "phi' crit ds (deg)", "measured peak - crit ds (deg)", "phi' peak ps est. (deg)",
                  "phi' crit ps est. (deg)",
                  "measured peak - crit ps est. (deg)", "I_D", "I_R (Bolton)", "expected 5 I_R ps (deg)",
                  "expected 3 I_R tx (deg)", "notes"), rows) + (
        "<p>ds: direct shear (secant angles); ps est.: plane-strain estimate by the Davis/Jewell relation. "
        f"{esc(DAVIS_JEWELL_ASSUMPTIONS)}. Taylor: atan(tau/sigma' - dy/dx), the ratio with the work of dilation "
        "removed (Taylor 1948). Bolton (1986): I_R = I_D (10 - ln p') - 1, clipped to 0-4; compare 5 I_R with the "
        "plane-strain estimate of the measured difference.</p>")


def design_caution_html(text: str) -> str:
    return f'<div class="sb-caution"><b>Caution: design values.</b> {esc(text)}</div>'


def _statistics_rows(st) -> str:
    if st is None:
        return "<p>EN 1990 Annex D statistics need three or more stages in the envelope.</p>"
    rows = [
        ("per-stage secant tan phi'", esc(", ".join(f"{v:.4f}" for v in st.values))),
        ("mean, sample s.d. (n - 1), V", f"{st.mean:.4f}, {st.sd:.5f}, {st.v_sample:.4f}"),
        ("V used", f"{st.v_used:.4f} ({'known, given by the engineer' if st.v_known else 'unknown: from the sample'})"),
        (f"k_n ({esc(st.target)})", f"{st.kn:.4f} ({esc(st.kn_source)})"),
        ("tan phi'_k = m (1 - k_n V)", f"{st.tan_phi_k:.4f} (phi'_k {st.phi_k_deg:.1f} deg)"),
        ("Schneider: m (1 - 0.5 V)", f"{st.schneider:.4f} ({st.phi_schneider_deg:.1f} deg), for comparison"),
    ]
    return table(("EN 1990 Annex D on tan phi'", "value"), rows)


def design_html(results: Results, u: Display = SI) -> str:
    """Characteristic values with the method, the EN 1990 comparison and design values with partial factors."""
    d = results.design
    if d is None:
        return "<p>No design values were derived.</p>"
    ch = d.choices
    lo, hi = d.stress_range_kpa if d.stress_range_kpa else (None, None)
    who = f"{esc(ch.author)} at {esc(ch.time_utc)}" if ch.author else "<b>not yet chosen by an engineer (defaults)</b>"
    choice_rows = [
        ("envelope", f"{esc(d.group)}, {_kind(d.kind)}"), ("parameter choice", esc(d.parameter_note)),
        ("limit state", esc(ch.limit_state) + (" (mean: large zone governs)" if ch.limit_state == "large zone" else
                                               " (5 % fractile: local failure)")),
        ("design normal-stress range", f"{u.fmt('stress', lo, 0)}&ndash;{u.fmt('stress', hi, 0)} "
                                       f"{u.unit('stress')} ({esc(d.range_source)})"),
        ("chosen by", who),
    ]
    out = [design_caution_html(d.caution), table(("choice", "value"), choice_rows)]
    if d.not_derived:
        out.append(f'<p class="sb-flag">Not derived: {esc(d.not_derived)}</p>')
        return "".join(out)
    out.append(table(("characteristic value", "value"), [
        (u.label("c'_k", "stress"), u.fmt("stress", d.c_k_kpa, 1)), ("phi'_k (deg)", num(d.phi_k_deg, 1)),
        ("tan phi'_k", num(d.tan_phi_k, 4)), ("method", esc(u.annotate(d.method))),
    ]))
    out += [f'<p class="sb-flag">{esc(u.annotate(f))}</p>' for f in d.flags]
    out.append(_statistics_rows(d.tan_phi_statistics))
    rows = []
    for v in d.design:
        table_a4 = v.set_name in PARTIAL_FACTOR_SETS
        src = " (EN 1997-1 Annex A Table A.4, recommended)" if table_a4 else " (engineer's values)"
        chosen = " <b>(chosen)</b>" if v is d.design[0] else ""
        rows.append((esc(v.set_name) + esc(src) + chosen, f"{v.gamma_phi:g}", f"{v.gamma_c:g}",
                     u.fmt("stress", v.c_d_kpa, 1), num(v.tan_phi_d, 4), num(v.phi_d_deg, 1)))
    heads = ("partial factor set", "gamma_phi' (on tan phi')", "gamma_c'", u.label("c'_d", "stress"), "tan phi'_d",
             "phi'_d (deg)")
    out.append(table(heads, rows))
    out.append("<p>tan phi'_d = tan phi'_k / gamma_phi'; c'_d = c'_k / gamma_c'. The National Annex or local code in "
               "force governs the factors and the design approach; edit them in the interpretation file's "
               "<code>design</code> choices.</p>")
    return "".join(out)
