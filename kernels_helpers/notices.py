"""What changed in the fits after an edit, and what stands out in them, in words for the live screen.

An edit can change more than the number that moved: excluding a stage can leave too few stages for a
fit with c' free (the envelope falls back to c' = 0), a pick can make c' negative, a flag can take a
stage out of a fit. :func:`fit_changes` names each such change between two results;
:func:`standing_notices` names what holds now (a negative c', a fallback to c' = 0, an envelope not
fitted). Plain data in, sentences out.
"""

from __future__ import annotations

from .decisions import Cohesion, PickKind
from .results import EnvelopeResult, Results

__all__ = ["fit_changes", "standing_notices"]


def _name(e: EnvelopeResult) -> str:
    return f"{e.group}, {e.kind.replace('_', ' ')}"


def _why_out(results: Results, stage_id: str, kind: PickKind) -> str:
    s = results.stage(stage_id)
    if not s.included:
        return f"excluded: {s.exclusion_reason}"
    if kind == "critical_state" and s.critical_state_left_out:
        return "critical state not reached (left out until a reason puts it back)"
    if kind == "peak" and s.no_distinct_peak is not None:
        return "no distinct peak"
    return "no value for this envelope"


def fit_changes(before: Results, after: Results) -> list[str]:
    """Every change of fit form, sign of c' or membership of a fit between ``before`` and ``after``."""
    old = {(e.group, e.kind): e for e in before.envelopes}
    out: list[str] = []
    for e in after.envelopes:
        b = old.get((e.group, e.kind))
        if b is None:
            continue
        if (b.chosen is None) != (e.chosen is None):
            out.append(f"{_name(e)}: " + ("no longer fitted: " + (e.not_fitted or "too few stages")
                                          if e.chosen is None else "fitted again"))
        elif b.reported != e.reported:
            out.append(f"{_name(e)}: now " + ("c' = 0 (through the origin): " + (e.not_fitted or "")
                                              if e.reported == Cohesion.ORIGIN else "c' free (enough stages again)"))
        if e.chosen is not None and e.chosen.negative_cohesion and not (b.chosen and b.chosen.negative_cohesion):
            out.append(f"{_name(e)}: c' became negative ({e.chosen.intercept:.3g} kPa): consider c' = 0")
        for sid in sorted(set(b.stage_ids) - set(e.stage_ids)):
            out.append(f"{_name(e)}: {sid} left the fit ({_why_out(after, sid, e.kind)})")
        for sid in sorted(set(e.stage_ids) - set(b.stage_ids)):
            out.append(f"{_name(e)}: {sid} joined the fit")
    return out


def standing_notices(results: Results) -> list[str]:
    """What the engineer must see beside the envelopes now, whatever the last edit was."""
    out: list[str] = []
    for e in results.envelopes:
        if e.chosen is None:
            out.append(f"{_name(e)}: not fitted ({e.not_fitted or 'too few stages'})")
            continue
        if e.reported == Cohesion.ORIGIN and e.not_fitted:
            out.append(f"{_name(e)}: c' = 0 reported because a fit with c' free is not possible ({e.not_fitted})")
        if e.chosen.negative_cohesion:
            out.append(f"{_name(e)}: negative c' ({e.chosen.intercept:.3g} kPa): consider c' = 0")
    return out
