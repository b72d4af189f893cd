"""A plain-text summary of results for the terminal: picks beside suggestions, exclusions, flags, envelopes."""

from __future__ import annotations

from .results import Results

__all__ = ["summary_text"]


def summary_text(results: Results) -> str:
    """What an engineer checks first, one stage per paragraph, then the envelopes."""
    out = [f"Project: {results.project.get('name', '')}", f"Stresses on the {results.conventions['area']} area.", ""]
    for s in results.stages:
        head = f"{s.stage_id} ({s.test_set}), sigma'n {s.sigma_nominal_kpa:.0f} kPa"
        out.append(head + ("" if s.included else f" - EXCLUDED: {s.exclusion_reason}"))
        p, ps = s.peak, s.peak_suggested
        if s.no_distinct_peak and s.peak_source == "suggested":
            out.append(f"  peak: {s.no_distinct_peak}")
        else:
            line = f"  peak ({s.peak_source}): x {p.x_mm:.2f} mm, tau {p.tau_kpa:.1f} kPa, sigma' {p.sigma_kpa:.1f} kPa"
            if s.peak_source == "manual":
                line += f" [suggested x {ps.x_mm:.2f} mm, tau {ps.tau_kpa:.1f} kPa]"
            out.append(line + (f" - {s.peak_note}" if s.peak_note else ""))
        c, cs = s.cs, s.cs_suggested
        line = (f"  critical state ({s.cs_source}): {c.x_from_mm:.2f}-{c.x_to_mm:.2f} mm, tau {c.tau_kpa:.1f} kPa "
                f"(s.d. {c.tau_sd_kpa:.2f}), tau/sigma {c.ratio:.3f}, dy/dx {c.dydx:+.4f}")
        if s.cs_source == "manual":
            line += f" [suggested {cs.x_from_mm:.2f}-{cs.x_to_mm:.2f} mm, tau {cs.tau_kpa:.1f} kPa]"
        out.append(line + (f" - {s.cs_note}" if s.cs_note else ""))
        if s.critical_state_left_out:
            out.append(f"  critical state {s.critical_state_left_out}")
        elif s.critical_state_used:
            out.append(f"  critical state not reached, used in the fit: {s.critical_state_reason}")
        if s.residual is not None:
            out.append(f"  residual: {s.residual.message}")
        if s.note:
            out.append(f"  note: {s.note}")
        out.extend(f"  flag: {f}" for f in s.flags)
    out.append("")
    out.append("Envelopes (reported fit):")
    for e in results.envelopes:
        fit = e.chosen
        name = f"  {e.group}, {e.kind.replace('_', ' ')}"
        if fit is None:
            out.append(f"{name}: not fitted ({e.not_fitted})")
            continue
        lo, hi = fit.phi_interval_deg
        c = "c' = 0 (through origin)" if fit.through_origin else f"c' {fit.intercept:.1f} kPa"
        out.append(f"{name}: phi' {fit.phi_deg:.1f} deg [{lo:.1f}, {hi:.1f}], {c}, n {fit.n}"
                   + (f" ({e.not_fitted})" if e.not_fitted else ""))
    out.append("")
    out.append("Caution: laboratory parameters need engineering judgement, the governing code "
               "and a licensed engineer's review.")
    return "\n".join(out) + "\n"
