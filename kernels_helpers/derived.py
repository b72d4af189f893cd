"""Everything derived from the envelopes: bands, curved fits, set comparisons, critical-state lines,
stress-dilatancy aids, and the characteristic and design values of the engineer's choice.

Pure functions of the stage and envelope results; :func:`derive` is called by the pipeline after
the envelopes are fitted and returns the extra fields of :class:`~kernels_helpers.results.Results`.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np

from .compare import SetComparison, compare_sets
from .critical_state import CriticalStateLine, fit_critical_state_line
from .decisions import DesignChoices, DesignKind
from .design import (
    PARTIAL_FACTOR_SETS,
    DesignValues,
    design_values,
    regression_characteristic,
    tan_phi_statistics,
)
from .dilatancy import StageDilatancy, stage_dilatancy
from .envelope import (
    LineFit,
    compare_linear_curved,
    confidence_band,
    fit_power_law,
    prediction_band,
    secant_phi_deg,
)
from .results import DesignResult, EnvelopeBands, EnvelopeResult, EnvelopeStatistics, StageResult, plain

# the records it fills (DesignResult, EnvelopeBands, EnvelopeStatistics) and plain() live in results.py
__all__ = ["DesignResult", "EnvelopeBands", "EnvelopeStatistics", "derive", "plain"]

PARAMETER_SET_NOTES = {
    "peak": ("peak parameters: for small anticipated strains, where the peak can be mobilised along the whole "
             "slip surface at once and is not lost by progressive failure or strain softening"),
    "critical_state": ("critical-state parameters: for large deformations, or where strain softening, progressive "
                       "failure or loosening of the ground can occur; the cautious choice when in doubt"),
}


def _floats(values: Iterable[float]) -> tuple[float, ...]:
    return tuple(float(v) for v in values)


def _bands(fit: LineFit, name: str, top: float) -> EnvelopeBands:
    grid = np.linspace(0.0, top, 41)
    m_lo, m_hi = confidence_band(fit, grid, fit.level)
    p_lo, p_hi = prediction_band(fit, grid, fit.level)
    line = fit.intercept + fit.slope * grid
    return EnvelopeBands(name, fit.level, *map(_floats, (grid, line, m_lo, m_hi, p_lo, p_hi)))


def envelope_statistics(env: EnvelopeResult, top_kpa: float) -> EnvelopeStatistics:
    """Secant angles, bands of both fits, power law and curvature comparison of one envelope."""
    secants = secant_phi_deg(env.sigma_kpa, env.tau_kpa) if env.stage_ids else ()
    top = max(top_kpa, 1.1 * max(env.sigma_kpa, default=0.0), 1.0)
    bands = tuple(_bands(f, name, top) for name, f in (("free", env.free), ("origin", env.origin)) if f is not None)
    power = curvature = None
    reason = None
    try:
        power = fit_power_law(env.sigma_kpa, env.tau_kpa)
    except (ValueError, RuntimeError) as exc:  # too few points, zero stress, or no convergence
        reason = str(exc)
    if power is not None and env.free is not None:
        curvature = compare_linear_curved(env.sigma_kpa, env.free, power)
    phi_s = _floats(power.phi_secant_deg(env.sigma_kpa)) if power else ()
    phi_t = _floats(power.phi_tangent_deg(env.sigma_kpa)) if power else ()
    return EnvelopeStatistics(env.group, env.kind, env.stage_ids, secants, bands, power, phi_s, phi_t, curvature,
                              reason)


def set_comparisons(envelopes: Iterable[EnvelopeResult], stages: Sequence[StageResult],
                    through_origin: bool) -> tuple[SetComparison, ...]:
    """A comparison for every pooled stratum envelope: each test set against the pool."""
    test_set = {s.stage_id: s.test_set for s in stages}
    out = []
    for env in envelopes:
        if not env.group.startswith("stratum ") or not env.stage_ids:
            continue
        sets: dict[str, tuple[list[float], list[float]]] = {}
        for sid, x, y in zip(env.stage_ids, env.sigma_kpa, env.tau_kpa, strict=True):
            xs, ys = sets.setdefault(test_set[sid], ([], []))
            xs.append(x)
            ys.append(y)
        fitted = env.free or env.origin
        level = fitted.level if fitted is not None else 0.95
        out.append(dataclasses.replace(compare_sets(sets, through_origin, level), group=env.group, kind=env.kind))
    return tuple(out)


def critical_state_lines(envelopes: Iterable[EnvelopeResult],
                         stages: Sequence[StageResult]) -> tuple[CriticalStateLine, ...]:
    """The critical-state line of every group whose critical-state envelope has 3 stages or more."""
    by_id = {s.stage_id: s for s in stages}
    out = []
    for env in envelopes:
        if env.kind != "critical_state" or len(env.stage_ids) < 3 or len(set(env.sigma_kpa)) < 2:
            continue
        ss = [by_id[i] for i in env.stage_ids]
        out.append(fit_critical_state_line(env.stage_ids, [s.test_set for s in ss],
                                           [s.critical_state.chosen.sigma_kpa for s in ss],
                                           [s.critical_state.chosen.e for s in ss],
                                           [s.reduced.e_start for s in ss], env.group))
    return tuple(out)


def dilatancy(stages: Sequence[StageResult],
              relative_density: Mapping[str, float | None]) -> tuple[StageDilatancy, ...]:
    """Stress-dilatancy angles of every stage (Bolton's index only where I_D is given)."""
    out = []
    for s in stages:
        distinct = not (s.no_distinct_peak and s.peak.source == "suggested")
        peak = (s.peak.chosen.ratio, s.peak.chosen.dydx, s.peak.chosen.sigma_kpa) if distinct else None
        i_d = relative_density.get(s.stage_id, relative_density.get(s.stage_id.split("/")[0]))  # "T/2": of test T
        cs = s.critical_state.chosen
        out.append(stage_dilatancy(s.stage_id, peak, (cs.ratio, cs.dydx, cs.sigma_kpa), i_d))
    return tuple(out)


def _default_group(envelopes: Sequence[EnvelopeResult], kind: DesignKind) -> str:
    names = [e.group for e in envelopes if e.kind == kind and e.chosen is not None]
    pooled = [g for g in names if g.startswith("stratum ")]
    return (pooled or names or [""])[0]


def _design_sets(c_k: float, tan_k: float, ch: DesignChoices) -> tuple[DesignValues, ...]:
    chosen = design_values(c_k, tan_k, ch.partial_factors, ch.gamma_phi, ch.gamma_c)
    others = [design_values(c_k, tan_k, n, *g) for n, g in PARTIAL_FACTOR_SETS.items() if n != ch.partial_factors]
    return (chosen, *others)


def design_result(envelopes: Sequence[EnvelopeResult], stages: Sequence[StageResult], choices: DesignChoices,
                  stress_range_kpa: tuple[float, float] | None) -> DesignResult:
    """c'_k, phi'_k and design values for the chosen group, parameter set and limit state."""
    kind = choices.parameter_set
    group = choices.group or _default_group(envelopes, kind)
    note = PARAMETER_SET_NOTES[kind] + (f"; engineer's note: {choices.note}" if choices.note else "")
    empty: dict[str, Any] = {
        "stress_range_kpa": stress_range_kpa, "range_source": "", "fit_used": None, "characteristic": None,
        "c_k_kpa": None, "tan_phi_k": None, "method": "", "tan_phi_statistics": None, "design": (),
        "parameter_note": note, "flags": ()}
    env = next((e for e in envelopes if e.group == group and e.kind == kind), None)
    if env is None or env.chosen is None:
        missing = f"no {kind.replace('_', '-')} envelope of group {group!r}"
        why = missing if env is None else (env.not_fitted or "not fitted")
        return DesignResult(choices, group, kind, **empty, not_derived=why)
    fit = env.chosen
    tested = (min(env.sigma_kpa), max(env.sigma_kpa))
    if stress_range_kpa is None:
        rng, source = tested, "the tested normal stresses (the project file gives no [design] normal_stress_range_kpa)"
    else:
        rng, source = stress_range_kpa, "project file [design] normal_stress_range_kpa"
    expressed = "secant" if choices.c_k_zero else choices.expressed
    ch = regression_characteristic(fit, rng, choices.limit_state, expressed, fit.level, tested)
    method = ch.method
    if choices.c_k_zero:
        method = f"c'_k set to zero by the engineer ({choices.c_k_zero_reason}); " + method
    stats = None
    flags = list(ch.flags)
    tan_values = [t / s for s, t in zip(env.sigma_kpa, env.tau_kpa, strict=True)]
    if len(tan_values) >= 3:
        stats = tan_phi_statistics(tan_values, choices.limit_state, choices.v_known)
        if not fit.through_origin and abs(fit.intercept) > 0.05 * float(np.mean(env.tau_kpa)):
            flags.append(f"the per-stage secant tan phi' depend on the stress when c' = {fit.intercept:.1f} kPa; the "
                         "EN 1990 Annex D values on them are for comparison only")
    return DesignResult(
        choices=choices, group=group, kind=kind, stress_range_kpa=rng, range_source=source,
        fit_used="origin" if fit.through_origin else "free", characteristic=ch, c_k_kpa=ch.c_k_kpa,
        tan_phi_k=ch.tan_phi_k, method=method, tan_phi_statistics=stats,
        design=_design_sets(ch.c_k_kpa, ch.tan_phi_k, choices), parameter_note=note, flags=tuple(flags),
    )


def derive(stages: Sequence[StageResult], envelopes: Sequence[EnvelopeResult], choices: DesignChoices,
           stress_range_kpa: tuple[float, float] | None, relative_density: Mapping[str, float | None],
           through_origin: bool) -> dict[str, Any]:
    """The derived fields of :class:`Results` (keyword arguments for its constructor)."""
    top = stress_range_kpa[1] if stress_range_kpa else 0.0
    return {
        "envelope_statistics": tuple(envelope_statistics(e, top) for e in envelopes),
        "set_comparisons": set_comparisons(envelopes, stages, through_origin),
        "critical_state_lines": critical_state_lines(envelopes, stages),
        "dilatancy": dilatancy(stages, relative_density),
        "design": design_result(envelopes, stages, choices, stress_range_kpa),
    }
