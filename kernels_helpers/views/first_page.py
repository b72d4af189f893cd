"""The record's first page: the answer first, then the detail.

One summary a reviewer reads before anything else: the parameters chosen for design and their
basis, the peak and critical-state envelope of every set (reported fit, 95 % intervals, stages
used and excluded), the open flags on included stages, the sign-off with its signatures, and the
digest that names this record's results. All user text is escaped.
"""

from __future__ import annotations

from collections.abc import Sequence

from ..decisions import Cohesion, Interpretation
from ..display_units import SI, Display
from ..escaping import css_string
from ..results import EnvelopeResult, Results
from ..signatures import Check
from .tables import CAUTION, SIGNOFF_STATES, esc, num, table

__all__ = ["first_page_html"]


def _kind(kind: str) -> str:
    return "critical state" if kind == "critical_state" else kind


def _design(results: Results, u: Display) -> str:
    d = results.design
    if d is None:
        return "<p><b>Design parameters:</b> none derived.</p>"
    if d.not_derived:
        return f'<p class="sb-flag"><b>Design parameters not derived:</b> {esc(d.not_derived)}</p>'
    ch, first = d.choices, d.design[0] if d.design else None
    who = f"chosen by {esc(ch.author)} at {esc(ch.time_utc)}" if ch.author else (
        '<span class="sb-flag">defaults, not yet chosen by an engineer</span>')
    rows = [("basis", f"{esc(d.group)}, {esc(_kind(d.kind))} envelope; {esc(d.parameter_note)}"),
            ("characteristic", f"c'_k = {u.with_unit('stress', d.c_k_kpa, 1)}, phi'_k = {num(d.phi_k_deg, 1)} deg "
                               f"({esc(ch.limit_state)}; {esc(u.annotate(d.method))})")]
    if first is not None:
        rows.append(("design", f"c'_d = {u.with_unit('stress', first.c_d_kpa, 1)}, "
                               f"phi'_d = {num(first.phi_d_deg, 1)} deg "
                               f"(partial factors {esc(first.set_name)}: gamma_phi' {first.gamma_phi:g}, "
                               f"gamma_c' {first.gamma_c:g})"))
    rows.append(("choice", who))
    return "<h3>Parameters for design</h3>" + table(("item", "value"), rows)


def _envelope_row(results: Results, e: EnvelopeResult, u: Display) -> tuple[str, ...]:
    members = [s for s in results.stages if s.in_group(e.group)]
    excluded = [s.stage_id for s in members if not s.included]
    left_out = [s.stage_id for s in members if s.included and e.kind == "critical_state" and s.critical_state_left_out]
    out = ", ".join(esc(x) for x in excluded) + (" (excluded)" if excluded else "")
    if left_out:
        out += ("; " if out else "") + ", ".join(esc(x) for x in left_out) + " (critical state not reached)"
    fit = e.chosen
    if fit is None:
        return (esc(e.group), esc(_kind(e.kind)), "not fitted", "&ndash;", "&ndash;", str(len(e.stage_ids)),
                out or "none", "too few stages (see Envelopes)")
    lo, hi = fit.phi_interval_deg
    c_lo, c_hi = fit.c_interval_kpa
    c = "0 (through origin)" if fit.through_origin else (
        f"{u.fmt('stress', fit.intercept, 1)} [{u.fmt('stress', c_lo, 1)}, {u.fmt('stress', c_hi, 1)}]")
    notes = ['<span class="sb-flag">negative c\'</span>'] if fit.negative_cohesion else []
    if e.not_fitted and e.reported == Cohesion.ORIGIN:
        notes.append("too few stages for c' free: c' = 0 reported")
    elif e.not_fitted:
        notes.append("see Envelopes")
    note = "; ".join(notes)
    return (esc(e.group), esc(_kind(e.kind)), "c' free" if e.reported == Cohesion.FREE else "c' = 0",
            f"{fit.phi_deg:.1f} [{lo:.1f}, {hi:.1f}]", c, str(fit.n), out or "none", note)


def _flags(results: Results, u: Display) -> str:
    open_flags = [(s.stage_id, f) for s in results.stages if s.included for f in s.flags]
    if not open_flags:
        return "<p><b>Open flags on included stages:</b> none.</p>"
    items = "".join(f"<li>{esc(sid)}: {esc(u.annotate(f))}</li>" for sid, f in open_flags)
    return (f'<p class="sb-flag"><b>Open flags on included stages: {len(open_flags)}</b> '
            "(each to be judged; detail under Flags)</p>" f'<ul class="sb-flags">{items}</ul>')


def _signoff(interpretation: Interpretation | None, checks: Sequence[Check]) -> str:
    if interpretation is None:
        return ""
    so = interpretation.signoff
    steps = [f"{esc(h.get('state', ''))} by {esc(h.get('who', ''))} at {esc(h.get('time_utc', ''))} "
             f"(signature: {esc(c.status)})" for h, c in zip(so.history, checks, strict=False)
             if h.get("state") != "draft"]
    css = ' class="sb-flag"' if so.state != "approved" else ""
    return (f"<p{css}><b>Sign-off:</b> {esc(SIGNOFF_STATES[so.state])}"
            + (": " + "; ".join(steps) if steps else "") + ".</p>")


def _as_saved(results: Results, interpretation: Interpretation | None) -> str:
    """Which saved interpretation these numbers come from (the live screen may have moved on since)."""
    sha = results.provenance.get("interpretation_sha256") or ""
    revision = f"revision {interpretation.revision}" if interpretation is not None else "as given"
    return (f"<p><b>Interpretation:</b> as saved, {revision}, SHA-256 <span class=\"sb-mono\">{esc(sha[:16])}"
            "...</span></p>" if sha else "")


def first_page_html(results: Results, interpretation: Interpretation | None, checks: Sequence[Check],
                    digest: str, u: Display = SI) -> str:
    """The summary at the head of the record."""
    p = results.project
    title = esc(p.get("name") or "Direct shear interpretation")
    facts = ", ".join(esc(p[k]) for k in ("site", "client", "reference") if p.get(k))
    invented = "<p><b>Invented example data (demonstration only).</b></p>" if p.get("invented_data") else ""
    invented += "" if u.is_si else (f"<p>Display units: {esc(u.name)}; the embedded results and every stored value "
                                    "are SI (kPa, mm, N).</p>")
    rows = [_envelope_row(results, e, u) for e in results.envelopes]
    level = next((e.chosen.level for e in results.envelopes if e.chosen is not None), 0.95)
    envelopes = table(("group", "envelope", "reported fit", f"phi' (deg) [{level * 100:g} % CI]",
                       f"c' ({u.unit('stress')}) [{level * 100:g} % CI]", "stages used", "left out", "remarks"), rows)
    footer = css_string(f"{p.get('name') or 'Shearbook record'} - record {digest[:16]}")
    return (
        f"<style>@page {{@bottom-left {{content: {footer}; font: 8pt sans-serif; color: #444;}}}}</style>"
        f'<div class="sb-first-page"><h1>Calculation record: {title}</h1>'
        + (f"<p>{facts}</p>" if facts else "") + invented
        + _design(results, u)
        + "<h3>Envelopes (Mohr-Coulomb, reported fit)</h3>" + envelopes
        + _flags(results, u) + _signoff(interpretation, checks)
        + _as_saved(results, interpretation)
        + f'<p><b>Record digest</b> (SHA-256 of the embedded results): <span class="sb-mono">{esc(digest)}</span></p>'
        + f'<div class="sb-caution"><b>Caution.</b> {esc(CAUTION)}</div></div>'
    )
