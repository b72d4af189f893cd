"""Leave-one-out sensitivity: each envelope refitted with one stage left out.

An engineer sees at once which stage drives c' and phi'. With c' free, two remaining points give
the exact line through them (no statistics); through the origin one point is enough.
"""

from __future__ import annotations

import math

from .envelope import fit_line, fit_through_origin
from .results import EnvelopeResult, LeaveOneOut

__all__ = ["LeaveOneOut", "leave_one_out"]  # LeaveOneOut: a record of results.py


def _free(sigma: list[float], tau: list[float], level: float) -> tuple[str, float | None, float | None]:
    if len(sigma) >= 3 and len(set(sigma)) > 1:
        fit = fit_line(sigma, tau, level)
        return "least squares, c' free", fit.phi_deg, fit.intercept
    if len(sigma) == 2 and sigma[0] != sigma[1]:
        slope = (tau[1] - tau[0]) / (sigma[1] - sigma[0])
        return ("exact line through the 2 remaining points (no statistics)", math.degrees(math.atan(slope)),
                tau[0] - slope * sigma[0])
    return f"{len(sigma)} point(s) left: no line with c' free", None, None


def leave_one_out(envelope: EnvelopeResult, level: float = 0.95) -> tuple[LeaveOneOut, ...]:
    """One row per stage of the envelope: both fits refitted without that stage."""
    full_free, full_origin = envelope.free, envelope.origin
    rows = []
    for i, stage_id in enumerate(envelope.stage_ids):
        sigma = [s for j, s in enumerate(envelope.sigma_kpa) if j != i]
        tau = [t for j, t in enumerate(envelope.tau_kpa) if j != i]
        method, phi, c = _free(sigma, tau, level)
        phi0 = None
        if len(sigma) >= 2:
            phi0 = fit_through_origin(sigma, tau, level).phi_deg
        elif sigma:  # one point: the secant angle
            phi0 = math.degrees(math.atan2(tau[0], sigma[0]))
        rows.append(LeaveOneOut(
            group=envelope.group, kind=envelope.kind, left_out=stage_id, n_left=len(sigma), method=method,
            phi_deg=phi, c_kpa=c,
            phi_change_deg=None if phi is None or full_free is None else phi - full_free.phi_deg,
            c_change_kpa=None if c is None or full_free is None else c - full_free.intercept,
            phi_origin_deg=phi0,
            phi_origin_change_deg=None if phi0 is None or full_origin is None else phi0 - full_origin.phi_deg,
        ))
    return tuple(rows)
