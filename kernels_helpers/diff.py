"""What changed between two interpretations of one project, in words an engineer reads.

Both interpretations are run through the same pipeline on the same readings, so the report says
not only which decisions changed but what that did to the picks and to c' and phi'.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from .decisions import Cohesion, Interpretation
from .pipeline import interpret
from .project import Project
from .results import Results, StageResult
from .reversal import Residual

__all__ = ["InterpretationDiff", "diff_interpretations"]


@dataclass(frozen=True)
class InterpretationDiff:
    """Sentences grouped by topic; empty when the two interpretations give the same answer."""

    stages: tuple[str, ...]
    settings: tuple[str, ...]
    signoff: tuple[str, ...]
    envelopes: tuple[str, ...]
    design: tuple[str, ...] = ()

    @property
    def empty(self) -> bool:
        return not (self.stages or self.settings or self.signoff or self.envelopes or self.design)

    def to_text(self, before: str = "before", after: str = "after") -> str:
        if self.empty:
            return f"No difference between {before} and {after}.\n"
        out = [f"Changes from {before} to {after}:"]
        for title, lines in (("Stages", self.stages), ("Settings", self.settings), ("Sign-off", self.signoff),
                             ("Envelopes", self.envelopes), ("Characteristic and design values", self.design)):
            if lines:
                out.append(f"{title}:")
                out.extend(f"  - {line}" for line in lines)
        return "\n".join(out) + "\n"


def _flat(d: Mapping[str, Any], prefix: str = "") -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, Mapping):
            out.update(_flat(v, key + "."))
        else:
            out[key] = v
    return out


def _stage_lines(a: StageResult, b: StageResult, residual_note: str = "") -> list[str]:
    sid, lines = a.stage_id, []
    if a.included != b.included:
        lines.append(f"{sid}: excluded ({b.exclusion_reason})" if not b.included
                     else f"{sid}: restored to the envelopes")
    elif not b.included and a.exclusion_reason != b.exclusion_reason:
        lines.append(f"{sid}: reason for exclusion changed to \"{b.exclusion_reason}\"")
    pa, pb = a.peak.chosen, b.peak.chosen
    if (a.peak.source, pa.index) != (b.peak.source, pb.index):
        lines.append(
            f"{sid}: peak {a.peak.source} at x = {pa.x_mm:.2f} mm (tau {pa.tau_kpa:.1f} kPa) -> {b.peak.source} at "
            f"x = {pb.x_mm:.2f} mm (tau {pb.tau_kpa:.1f} kPa): moved {pb.x_mm - pa.x_mm:+.2f} mm, "
            f"tau {pb.tau_kpa - pa.tau_kpa:+.1f} kPa" + (f"; note: {b.peak.note}" if b.peak.note else "")
        )
    ca, cb = a.critical_state.chosen, b.critical_state.chosen
    if (a.critical_state.source, ca.x_from_mm, ca.x_to_mm) != (b.critical_state.source, cb.x_from_mm, cb.x_to_mm):
        lines.append(
            f"{sid}: critical-state window {a.critical_state.source} {ca.x_from_mm:.2f}-{ca.x_to_mm:.2f} mm "
            f"(tau {ca.tau_kpa:.1f} kPa)"
            f" -> {b.critical_state.source} {cb.x_from_mm:.2f}-{cb.x_to_mm:.2f} mm (tau {cb.tau_kpa:.1f} kPa): "
            f"tau {cb.tau_kpa - ca.tau_kpa:+.1f} kPa"
            + (f"; note: {b.critical_state.note}" if b.critical_state.note else "")
        )
    if (a.critical_state_used, a.critical_state_reason) != (b.critical_state_used, b.critical_state_reason):
        lines.append(f"{sid}: critical state not reached, put back in the critical-state fit: "
                     f"\"{b.critical_state_reason}\"" if b.critical_state_used
                     else f"{sid}: critical state not reached, left out of the critical-state fit again")
    ra, rb = (None if x.residual is None else x.residual.chosen for x in (a, b))
    sa, sb = ("suggested" if x.residual is None else x.residual.source for x in (a, b))
    if sa != sb or (ra and ra.tau_kpa) != (rb and rb.tau_kpa):
        lines.append(f"{sid}: residual {sa} ({_residual(ra)}) -> {sb} ({_residual(rb)})"
                     + (f"; note: {residual_note}" if residual_note else ""))
    if a.note != b.note:
        lines.append(f"{sid}: note changed to \"{b.note}\"" if b.note else f"{sid}: note removed")
    return lines


def _residual(r: Residual | None) -> str:
    if r is None:
        return "none"
    if r.tau_kpa is None:
        return "not reached"
    return f"tau {r.tau_kpa:.1f} kPa" + ("" if r.reached else ", not reached")


def _f(value: float, sign: str = "") -> str:
    """Two decimals, never "-0.00"."""
    text = f"{value:{sign}.2f}"
    return "0.00" if float(text) == 0 else text


def _form(reported: str) -> str:
    return "c' = 0" if reported == Cohesion.ORIGIN else "c' free"


def _envelope_lines(ra: Results, rb: Results) -> list[str]:
    lines = []
    for eb in rb.envelopes:
        ea = ra.envelope(eb.group, eb.kind)
        fa, fb = ea.chosen, eb.chosen
        name = f"{eb.group}, {eb.kind.replace('_', ' ')}"
        if fa is None and fb is None:
            continue
        if fa is None or fb is None:
            lines.append(f"{name}: {'no longer fitted' if fb is None else 'now fitted'}"
                         + (f" (phi' {fb.phi_deg:.1f} deg, c' {fb.intercept:.1f} kPa)" if fb else ""))
            continue
        if (fa.slope, fa.intercept, ea.stage_ids) == (fb.slope, fb.intercept, eb.stage_ids):
            continue
        form = "" if ea.reported == eb.reported else f" (fit {_form(ea.reported)} -> {_form(eb.reported)})"
        lines.append(
            f"{name}: phi' {_f(fa.phi_deg)} -> {_f(fb.phi_deg)} deg ({_f(fb.phi_deg - fa.phi_deg, '+')}), "
            f"c' {_f(fa.intercept)} -> {_f(fb.intercept)} kPa ({_f(fb.intercept - fa.intercept, '+')}), "
            f"stages {len(ea.stage_ids)} -> {len(eb.stage_ids)}{form}"
        )
    return lines


_STAMPS = ("author", "time_utc")  # who and when: reported with the change, not as one


def _design_lines(before: Interpretation, after: Interpretation, ra: Results, rb: Results) -> list[str]:
    da, db = dataclasses.asdict(before.design), dataclasses.asdict(after.design)
    changed = [k for k in da if k not in _STAMPS and da[k] != db[k]]
    lines = [f"{k}: {da[k]!r} -> {db[k]!r}" for k in changed]
    if changed and after.design.author:
        lines.append(f"choices changed by {after.design.author} at {after.design.time_utc}")
    xa, xb = ra.design, rb.design
    if xa is None or xb is None:
        if (xa is None) != (xb is None):
            lines.append("characteristic values " + ("no longer derived" if xb is None else "now derived"))
        return lines
    ka, kb = (xa.phi_k_deg, xa.c_k_kpa), (xb.phi_k_deg, xb.c_k_kpa)
    if ka != kb:
        lines.append(_pair("phi'_k", "deg", ka[0], kb[0]) + ", " + _pair("c'_k", "kPa", ka[1], kb[1]))
    if xa.design and xb.design:
        a0, b0 = xa.design[0], xb.design[0]  # the chosen set
        if (a0.set_name, a0.phi_d_deg, a0.c_d_kpa) != (b0.set_name, b0.phi_d_deg, b0.c_d_kpa):
            lines.append(f"design values ({a0.set_name} -> {b0.set_name}): " + _pair("phi'_d", "deg", a0.phi_d_deg,
                                                                                    b0.phi_d_deg)
                         + ", " + _pair("c'_d", "kPa", a0.c_d_kpa, b0.c_d_kpa))
    return lines


def _pair(name: str, unit: str, a: float | None, b: float | None) -> str:
    if a is None or b is None:
        return f"{name} {'none' if a is None else _f(a)} -> {'none' if b is None else _f(b)} {unit}"
    return f"{name} {_f(a)} -> {_f(b)} {unit} ({_f(b - a, '+')})"


def diff_interpretations(project: Project, before: Interpretation, after: Interpretation) -> InterpretationDiff:
    """Compare two interpretations of ``project`` by their decisions and by their results."""
    ra, rb = interpret(project, before), interpret(project, after)
    notes = {sid: d.residual.note for sid, d in after.stages.items()}
    stages = [line for sa, sb in zip(ra.stages, rb.stages, strict=True)
              for line in _stage_lines(sa, sb, notes.get(sb.stage_id, ""))]
    fa, fb = _flat(before.settings.to_dict()), _flat(after.settings.to_dict())
    settings = [f"{k}: {fa.get(k)!r} -> {fb.get(k)!r}" for k in sorted(set(fa) | set(fb)) if fa.get(k) != fb.get(k)]
    signoff = []
    if before.signoff.state != after.signoff.state:
        last = after.signoff.history[-1] if after.signoff.history else None
        who = f" by {last['who']} at {last['time_utc']}" if last else ""
        signoff.append(f"{before.signoff.state} -> {after.signoff.state}{who}")
    return InterpretationDiff(tuple(stages), tuple(settings), tuple(signoff), tuple(_envelope_lines(ra, rb)),
                              tuple(_design_lines(before, after, ra, rb)))
