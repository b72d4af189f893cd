"""A plain-text summary of results for the terminal: picks beside suggestions, exclusions, flags, envelopes."""

from __future__ import annotations

from .decisions import SignOff
from .display_units import SI, Display
from .results import Results

__all__ = ["summary_text"]


def summary_text(results: Results, u: Display = SI, signoff: SignOff | None = None) -> str:
    """What an engineer checks first, one stage per paragraph, then the envelopes and the sign-off."""
    out = [f"Project: {results.project.get('name', '')}", f"Stresses on the {results.conventions['area']} area."]
    if not u.is_si:
        out.append(f"Display units: {u.name}; stored values stay SI.")
    out.append("")
    for s in results.stages:
        head = f"{s.stage_id} ({s.test_set}), sigma'n {u.text('stress', s.sigma_nominal_kpa, 0)}"
        out.append(head + ("" if s.included else f" - EXCLUDED: {s.exclusion_reason}"))
        p, ps = s.peak.chosen, s.peak.suggested
        if s.no_distinct_peak and s.peak.source == "suggested":
            out.append(f"  peak: {s.no_distinct_peak}")
        else:
            line = (f"  peak ({s.peak.source}): x {u.text('length', p.x_mm, 2)}, tau {u.text('stress', p.tau_kpa, 1)}, "
                    f"sigma' {u.text('stress', p.sigma_kpa, 1)}")
            if s.peak.source == "manual":
                line += f" [suggested x {u.text('length', ps.x_mm, 2)}, tau {u.text('stress', ps.tau_kpa, 1)}]"
            out.append(line + (f" - {s.peak.note}" if s.peak.note else ""))
        c, cs = s.critical_state.chosen, s.critical_state.suggested
        line = (f"  critical state ({s.critical_state.source}): "
                f"{u.fmt('length', c.x_from_mm, 2)}-{u.text('length', c.x_to_mm, 2)}, "
                f"tau {u.text('stress', c.tau_kpa, 1)} (s.d. {u.text('stress', c.tau_sd_kpa, 2)}), "
                f"tau/sigma {c.ratio:.3f}, dy/dx {c.dydx:+.4f}")
        if s.critical_state.source == "manual":
            line += (f" [suggested {u.fmt('length', cs.x_from_mm, 2)}-{u.text('length', cs.x_to_mm, 2)}, "
                     f"tau {u.text('stress', cs.tau_kpa, 1)}]")
        out.append(line + (f" - {s.critical_state.note}" if s.critical_state.note else ""))
        if s.critical_state_left_out:
            out.append(f"  critical state {s.critical_state_left_out}")
        elif s.critical_state_used:
            out.append(f"  critical state not reached, used in the fit: {s.critical_state_reason}")
        if s.residual is not None:
            out.append(f"  residual: {u.annotate(s.residual.chosen.message)}")
        if s.note:
            out.append(f"  note: {s.note}")
        out.extend(f"  flag: {u.annotate(f)}" for f in s.flags)
    out.append("")
    out.append("Envelopes (reported fit):")
    for e in results.envelopes:
        fit = e.chosen
        name = f"  {e.group}, {e.kind.replace('_', ' ')}"
        if fit is None:
            out.append(f"{name}: not fitted ({e.not_fitted})")
            continue
        lo, hi = fit.phi_interval_deg
        cohesion = "c' = 0 (through origin)" if fit.through_origin else f"c' {u.text('stress', fit.intercept, 1)}"
        if fit.negative_cohesion:
            cohesion += " (negative: consider c' = 0)"
        out.append(f"{name}: phi' {fit.phi_deg:.1f} deg [{lo:.1f}, {hi:.1f}], {cohesion}, n {fit.n}"
                   + (f" ({e.not_fitted})" if e.not_fitted else ""))
    if signoff is not None:
        out.append("")
        out.append(f"Sign-off: {signoff.state}" + ("" if signoff.history else " (no step recorded)"))
        for h in signoff.history:
            signed = f", signed as {h['signature']['principal']}" if h.get("signature") else ", unsigned"
            out.append(f"  {h['state']} by {h['who']} at {h['time_utc']}{signed}"
                       + (f" - {h['note']}" if h.get("note") else ""))
    out.append("")
    out.append("Caution: laboratory parameters need engineering judgement, the governing code "
               "and a licensed engineer's review.")
    return "\n".join(out) + "\n"
