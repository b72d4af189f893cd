"""The one-way pipeline: ``results = interpret(project, interpretation)``.

readings -> reduction -> suggestions -> effective picks -> envelopes -> results. Each step is a
pure function of the ones above it; nothing here reads widgets or writes files.
"""

from __future__ import annotations

import dataclasses
import functools
import importlib.metadata
import platform
import sys
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path
from typing import Literal, TypeVar

import numpy as np

from .apparatus import Correction, correction_flags, corrections_at
from .decisions import Cohesion
from .derived import derive
from .envelope import fit_line, fit_through_origin
from .errors import InterpretationFileError
from .interpretation import (
    INTERPRETATION_FILE,
    FitSettings,
    Interpretation,
    PickKind,
    Settings,
    StageDecision,
    check_stage_ids,
    load_interpretation,
)
from .multistage import expand_multistage
from .outliers import envelope_outliers
from .picks import PointValues, WindowValues, at_point, over_window, peak_flags, suggest_critical_state, suggest_peak
from .project import Project, StageSpec, load_project
from .readings import StageReadings, read_stage, sha256_of
from .reduce import ReducedStage, reduce_stage, settlement_of
from .results import EnvelopeResult, Results, StagePick, StageResult
from .reversal import PassStress, Residual, pass_stresses, residual_over_window, residual_strength
from .sensitivity import leave_one_out
from .settings import PickSettings
from .stage_checks import Consolidation, StageChecks, check_stage, consolidation_of

__all__ = ["analyse_stage", "assemble_results", "fit_envelopes", "interpret", "pair_flags", "provenance",
           "raw_file_hashes", "read_all", "stage_units"]

DEPENDENCIES = ("numpy", "scipy", "pandas")


def read_all(project: Project) -> dict[str, StageReadings]:
    """Read every stage's readings file (hashing the exact bytes read)."""
    return {s.id: read_stage(s) for s in project.stages}


def stage_units(project: Project, readings: Mapping[str, StageReadings]) -> list[tuple[StageSpec, StageReadings, bool]]:
    """The stages to analyse, in order: each declared stage, multi-stage tests split into theirs.

    The third item is True for a later stage of a multi-stage test that continues from the previous
    displacement (it takes the x origin of the test's first stage).
    """
    units: list[tuple[StageSpec, StageReadings, bool]] = []
    for spec in project.stages:
        if spec.test_type == "multi-stage":
            units.extend(expand_multistage(spec, readings[spec.id]))
        else:
            units.append((spec, readings[spec.id], False))
    return units


T = TypeVar("T")


def _on_curve(reduced: ReducedStage, spec: StageSpec, what: str, *xs_mm: float) -> None:
    """A manual pick lies on the stage's shearing curve (to within one reading): never snapped from far away."""
    x = reduced.pick_rows["x_mm"].to_numpy()
    lo, hi = float(x.min()), float(x.max())
    step = float(np.median(np.abs(np.diff(x)))) if len(x) > 1 else 0.0
    for value in xs_mm:
        if not lo - step <= value <= hi + step:
            raise InterpretationFileError(
                f"stage {spec.id!r}: the manual {what} at {value:g} mm lies outside the curve, which runs from "
                f"{lo:.3f} to {hi:.3f} mm; move it onto the curve, or put it back to the suggestion.")


def _manual(spec: StageSpec, what: str, evaluate: Callable[[], T]) -> T:
    """A manual pick's values, or an error naming the stage and the pick (e.g. a window of too few readings)."""
    try:
        return evaluate()
    except ValueError as exc:
        raise InterpretationFileError(f"stage {spec.id!r}: the manual {what}: {exc}; widen it, or put it back to "
                                      "the suggestion.") from None


def analyse_stage(spec: StageSpec, readings: StageReadings, decision: StageDecision, settings: Settings,
                  saved_sha256: str | None = None, origin_mm: float | None = None,
                  reduced: ReducedStage | None = None, saved_files: Mapping[str, str] | None = None,
                  consolidation: Consolidation | Literal["read"] | None = "read") -> StageResult:
    """Reduce one stage, suggest its picks and evaluate the picks the engineer chose.

    ``reduced``: this stage's reduction under ``settings.reduction`` when the caller already has it
    (the live workbook: a pick does not change the reduction); computed here otherwise.
    ``consolidation``: the stage's consolidation readings and analysis (:func:`consolidation_of`) when
    the caller already has them (None: the stage has none); "read": read and analysed here.

    The steps, in the order the data needs them: the consolidation stage (:func:`_consolidation`),
    the reduction from the height at the start of shearing it gives, the suggestions
    (:func:`_suggestions`), the picks in use (:func:`_picks`), the residual of a reversal test
    (:func:`_residual`), the checks and their flags (:func:`_checks`), the stale-file flags
    (:func:`_stale_flags`).
    """
    consolidation, final, compliance = _consolidation(spec, consolidation)
    if reduced is None:
        reduced = reduce_stage(spec, readings, settings.reduction, origin_mm,
                               settlement_of(spec.specimen.consolidation_settlement_mm, final))
    suggested = _suggestions(reduced, settings.picks)
    picks = _picks(spec, reduced, decision, settings.picks, suggested)
    residual = _residual(spec, reduced, decision, settings.picks)
    checks, corrections, flags = _checks(spec, readings, reduced, picks, settings, consolidation, compliance)
    if residual.flag:
        flags.append(residual.flag)
    stale_flags, stale = _stale_flags(spec, readings, decision, saved_sha256, saved_files)
    return StageResult(
        stage_id=spec.id, test_set=spec.test_set, stratum=spec.stratum, relpath=spec.relpath,
        sha256=readings.sha256, size_bytes=readings.size_bytes, reduced=reduced,
        included=decision.included, exclusion_reason=decision.exclusion_reason, note=decision.note,
        critical_state_used=decision.critical_state_used, critical_state_reason=decision.critical_state_reason,
        peak=picks.peak, no_distinct_peak=picks.no_peak, critical_state=picks.critical_state,
        passes=residual.passes, residual=residual.residual,
        flags=(*flags, *stale_flags), stale=stale,
        consolidation=checks.consolidation, rate=checks.rate, unreliable=checks.unreliable, corrections=corrections,
    )


def _consolidation(spec: StageSpec, consolidation: Consolidation | Literal["read"] | None
                   ) -> tuple[Consolidation | None, float | None, tuple[float, float] | None]:
    """The consolidation stage: its readings and analysis, the settlement it gives (apparatus compliance taken
    out) and the compliance taken out ((taken out, as measured), or None)."""
    if consolidation == "read":
        consolidation = consolidation_of(spec)
    final = consolidation.result.final_settlement_mm if consolidation is not None else None
    compliance = _compliance_of_settlement(spec, final)
    if compliance is not None and final is not None:
        final = final - compliance[0]
    return consolidation, final, compliance


@dataclasses.dataclass(frozen=True)
class _Suggested:
    """What the rules suggest: the critical-state window's values, the peak's place, or why there is no peak."""

    critical_state: WindowValues
    x_peak_mm: float
    no_peak: str | None


def _suggestions(reduced: ReducedStage, p: PickSettings) -> _Suggested:
    """The suggested critical-state window, then the peak before it (the record may stop a short way past it)."""
    cs_from, cs_to = suggest_critical_state(reduced, p)
    cs = over_window(reduced, cs_from, cs_to, p)
    x_peak, no_peak = suggest_peak(reduced, cs, p)
    if no_peak is None and x_peak >= cs.x_from_mm:
        cs = dataclasses.replace(cs, flags=(*cs.flags, (
            f"critical state not reached: the record ends {cs.x_to_mm - x_peak:.2f} mm after the peak at "
            f"{x_peak:.2f} mm, inside the last {p.critical_state_window_mm:g} mm taken for critical state")))
    return _Suggested(cs, x_peak, no_peak)


@dataclasses.dataclass(frozen=True)
class _Picks:
    """The peak and the critical state: the suggestions and the picks in use (the engineer's where manual)."""

    peak: StagePick[PointValues]
    no_peak: str | None  # why the curve has no distinct peak (None: it has one, or the engineer picked one)
    critical_state: StagePick[WindowValues]


def _picks(spec: StageSpec, reduced: ReducedStage, decision: StageDecision, p: PickSettings,
           suggested: _Suggested) -> _Picks:
    """The peak and critical-state window in use; a manual pick must lie on the curve."""
    peak_suggested = at_point(reduced, suggested.x_peak_mm)
    cs, peak, no_peak = suggested.critical_state, peak_suggested, suggested.no_peak
    window = decision.critical_state
    if window.source == "manual":
        assert window.x_from_mm is not None and window.x_to_mm is not None  # Pick.check makes sure
        lo, hi = window.x_from_mm, window.x_to_mm
        _on_curve(reduced, spec, "critical-state window", lo, hi)
        cs = _manual(spec, "critical-state window", lambda: over_window(reduced, lo, hi, p))
    chosen = decision.peak
    if chosen.source == "manual":
        assert chosen.x_mm is not None  # Pick.check makes sure
        _on_curve(reduced, spec, "peak", chosen.x_mm)
        peak, no_peak = at_point(reduced, chosen.x_mm), None  # the engineer picked a peak on purpose
    return _Picks(StagePick(chosen.source, peak_suggested, peak, chosen.note), no_peak,
                  StagePick(window.source, suggested.critical_state, cs, window.note))


@dataclasses.dataclass(frozen=True)
class _ResidualStep:
    """A reversal test's passes and residual strengths; the flag when the suggested residual is not reached."""

    passes: tuple[PassStress, ...] = ()
    residual: StagePick[Residual] | None = None
    flag: str | None = None


def _residual(spec: StageSpec, reduced: ReducedStage, decision: StageDecision, p: PickSettings) -> _ResidualStep:
    """Stress at the end of every pass, the rule's residual, and the manual residual window if one is chosen."""
    if spec.test_type != "reversal":
        return _ResidualStep()
    c = reduced.curve[reduced.curve["in_shear"].to_numpy()]
    x, tau, sigma, labels = (c[k].to_numpy() for k in ("x_mm", "tau_kpa", "sigma_kpa", "pass_no"))
    passes = pass_stresses(x, tau, sigma, labels)
    suggested = residual_strength(passes, p.residual_tolerance)
    r = decision.residual
    if r.source == "manual":
        assert r.pass_no is not None and r.x_from_mm is not None and r.x_to_mm is not None  # Pick.check makes sure
        pass_no, lo, hi = r.pass_no, r.x_from_mm, r.x_to_mm
        manual = _manual(spec, "residual window",
                         lambda: residual_over_window(x, tau, sigma, labels, pass_no, lo, hi, r.note))
        return _ResidualStep(passes, StagePick("manual", suggested, manual, r.note))
    return _ResidualStep(passes, StagePick("suggested", suggested, suggested),
                         None if suggested.reached else suggested.message)


def _checks(spec: StageSpec, readings: StageReadings, reduced: ReducedStage, picks: _Picks, settings: Settings,
            consolidation: Consolidation | None, compliance: tuple[float, float] | None
            ) -> tuple[StageChecks, tuple[Correction, ...], list[str]]:
    """The flags of the picks, of the specimen, spike, normal-load, consolidation and drained-rate checks
    (stage_checks.py) and of the apparatus corrections, in that order."""
    cs, peak, distinct = picks.critical_state.chosen, picks.peak.chosen, picks.no_peak is None
    flags = list(cs.flags)
    if distinct:
        flags.extend(peak_flags(reduced, peak, settings.picks))
    checks = check_stage(spec, readings, reduced, peak.x_mm if distinct else cs.x_from_mm,
                         settings.rate.time_to_failure, consolidation, settings.picks)
    flags.extend(checks.flags)
    corrections: tuple[Correction, ...] = ()
    if spec.apparatus is not None:
        corrections = corrections_at(spec, readings.table, peak.index if distinct else _row_at(reduced, cs.x_to_mm),
                                     compliance)
    flags.extend(correction_flags(corrections))
    return checks, corrections, flags


def _stale_flags(spec: StageSpec, readings: StageReadings, decision: StageDecision, saved_sha256: str | None,
                 saved_files: Mapping[str, str] | None) -> tuple[list[str], bool]:
    """Flags for a raw file (shearing or consolidation readings) changed since the interpretation was saved."""
    flags: list[str] = []
    stale = saved_sha256 is not None and saved_sha256 != readings.sha256
    if saved_sha256 is not None and stale:
        manual = [k for k, c in (("peak", decision.peak), ("critical state", decision.critical_state))
                  if c.source == "manual"]
        flags.append(
            f"raw file {spec.relpath} changed since the interpretation was saved (SHA-256 {saved_sha256[:12]}... "
            f"now {readings.sha256[:12]}...): review the {' and '.join(manual) or 'suggested'} pick(s) of this stage"
        )
    cons = spec.consolidation
    saved_cons = (saved_files or {}).get(cons.relpath) if cons is not None else None
    if cons is not None and saved_cons is not None:
        cons_now = sha256_of(cons.file) if cons.file.is_file() else None
        if saved_cons != cons_now:
            now = f"now {cons_now[:12]}..." if cons_now else "now missing"
            flags.append(f"raw file {cons.relpath} (consolidation stage) changed since the interpretation was saved "
                         f"(SHA-256 {saved_cons[:12]}... {now}): review the rate check and the picks of this stage")
            stale = True
    return flags, stale


def _row_at(reduced: ReducedStage, x_mm: float) -> int:
    """The shearing reading nearest to ``x_mm`` (where a no-peak stage's strength is stated)."""
    c = reduced.curve
    x = np.where(c["in_shear"].to_numpy(), c["x_mm"].to_numpy(), np.inf)
    return int(np.argmin(np.abs(x - x_mm)))


def _compliance_of_settlement(spec: StageSpec, final_mm: float | None) -> tuple[float, float] | None:
    """The apparatus deflection at the stage's load, to take out of a settlement from the consolidation readings.

    None when there is no compliance calibration, or the settlement used is the one declared in the project
    file (the laboratory's value, left as it is).
    """
    app = spec.apparatus
    if app is None or app.vertical_compliance is None or final_mm is None:
        return None
    if spec.specimen.consolidation_settlement_mm is not None:
        return None
    from .apparatus import compliance_at

    return float(compliance_at(app, np.array([spec.normal_load.force_n]))[0]), float(final_mm)


def pair_flags(stages: tuple[StageResult, ...], ratio_tolerance: float = 0.05, e_tolerance: float = 0.05,
               ) -> tuple[StageResult, ...]:
    """Flag stages of one stratum, from different test sets, at about the same normal stress (within 10 %),
    whose critical states clearly differ: tau/sigma by more than ``ratio_tolerance`` (relative) or void
    ratio by more than ``e_tolerance``. Dense and loose specimens of one soil should reach the same
    critical state (common practice; REFERENCES sec. 5)."""
    extra: dict[str, list[str]] = {s.stage_id: [] for s in stages}
    for i, a in enumerate(stages):
        for b in stages[i + 1 :]:
            if not a.stratum or a.stratum != b.stratum or a.test_set == b.test_set:
                continue
            if abs(a.sigma_nominal_kpa - b.sigma_nominal_kpa) > 0.1 * max(a.sigma_nominal_kpa, b.sigma_nominal_kpa):
                continue
            ca, cb = a.critical_state.chosen, b.critical_state.chosen
            dr = abs(ca.ratio - cb.ratio) / max(ca.ratio, cb.ratio)
            de = abs(ca.e - cb.e)
            for me, other in ((a, b), (b, a)):
                if dr > ratio_tolerance:
                    extra[me.stage_id].append(
                        f"critical-state stress ratio {me.critical_state.chosen.ratio:.3f} differs from "
                        f"{other.critical_state.chosen.ratio:.3f} "
                        f"of {other.stage_id} ({other.test_set}) at the same normal stress by {dr * 100:.1f} %: "
                        "dense and loose specimens should reach the same critical state; check both picks")
                if de > e_tolerance:
                    extra[me.stage_id].append(
                        f"void ratio at critical state {me.critical_state.chosen.e:.3f} differs from "
                        f"{other.critical_state.chosen.e:.3f} of {other.stage_id} "
                        f"({other.test_set}) by {de:.3f}: the specimen-average void ratio may not represent "
                        "the shear zone, or critical state was not reached")
    return tuple(
        dataclasses.replace(s, flags=(*s.flags, *extra[s.stage_id])) if extra[s.stage_id] else s for s in stages
    )


def _groups(stages: Iterable[StageResult]) -> dict[str, list[StageResult]]:
    """Envelope groups: each test set, and each stratum that holds more than one test set."""
    out: dict[str, list[StageResult]] = {}  # names as StageResult.in_group reads them
    strata: dict[str, set[str]] = {}
    for s in stages:
        out.setdefault(s.test_set or "all stages", []).append(s)
        if s.stratum:
            strata.setdefault(s.stratum, set()).add(s.test_set)
    for stratum, sets in strata.items():
        if len(sets) > 1:
            out[f"stratum {stratum} (all sets)"] = [s for s in stages if s.stratum == stratum]
    return out


def _stresses(s: StageResult, kind: PickKind) -> tuple[float, float]:
    """(sigma', tau) of a stage's pick of one kind, for a stage that the envelope of that kind takes."""
    p = s.strength(kind)
    assert p is not None and p.sigma_kpa is not None and p.tau_kpa is not None, (s.stage_id, kind)
    return p.sigma_kpa, p.tau_kpa


def _envelope(group: str, kind: PickKind, members: list[StageResult], fit: FitSettings) -> EnvelopeResult:
    if kind == "residual":
        used = [s for s in members if s.included and s.residual is not None and s.residual.chosen.reached]
    else:
        used = [s for s in members if s.included and (kind != "peak" or s.no_distinct_peak is None)
                and (kind != "critical_state" or s.critical_state_left_out is None)]
    pairs = [_stresses(s, kind) for s in used]
    sigma = tuple(float(x) for x, _ in pairs)
    tau = tuple(float(y) for _, y in pairs)
    ids = tuple(s.stage_id for s in used)
    free = fit_line(sigma, tau, fit.level) if len(used) >= 3 and len(set(sigma)) > 1 else None
    origin = fit_through_origin(sigma, tau, fit.level) if len(used) >= 2 else None
    reason = None
    reported = fit.cohesion
    if free is None:
        reason = (f"{len(used)} included stage(s) with a {kind.replace('_', '-')} value: "
                  "a fit with c' free needs 3 or more")
        if kind == "peak" and len(used) < len(members):
            reason += " (stages without a distinct peak and excluded stages do not count)"
        if kind == "critical_state" and len(used) < len(members):
            reason += " (excluded stages and critical states not reached do not count)"
        if origin is not None:
            reported = Cohesion.ORIGIN
            reason += "; the through-origin fit (c' = 0) is reported instead"
    return EnvelopeResult(group, kind, ids, sigma, tau, free, origin, reported, reason)


def outlier_flags(stages: tuple[StageResult, ...], envelopes: Iterable[EnvelopeResult],
                  level: float) -> tuple[StageResult, ...]:
    """Each stage lying far from the envelope of the other stages of its group, flagged (``outliers.py``)."""
    extra: dict[str, list[str]] = {}
    for env in envelopes:
        for o in envelope_outliers(env, level):
            extra.setdefault(o.stage_id, []).append(o.flag)
    return tuple(dataclasses.replace(s, flags=(*s.flags, *extra[s.stage_id])) if s.stage_id in extra else s
                 for s in stages)


def fit_envelopes(stages: Iterable[StageResult], fit: FitSettings) -> tuple[EnvelopeResult, ...]:
    """Peak and critical-state envelopes for every group of stages (and residual for reversal tests)."""
    out: list[EnvelopeResult] = []
    for group, members in _groups(list(stages)).items():
        kinds: list[PickKind] = ["peak", "critical_state"]
        if any(s.residual is not None for s in members):
            kinds.append("residual")
        out.extend(_envelope(group, kind, members, fit) for kind in kinds)
    return tuple(out)


def raw_file_hashes(project: Project, readings: Mapping[str, StageReadings]) -> dict[str, str]:
    """SHA-256 of every raw file of the project (readings and consolidation files), by relative path."""
    prov = provenance(project, readings, None)
    return {name: info["sha256"] for name, info in prov["raw_files"].items()}  # type: ignore[attr-defined]


def provenance(project: Project, readings: Mapping[str, StageReadings],
               interpretation: Interpretation | None) -> dict[str, object]:
    """Inputs' hashes and software versions (no time stamp: results must re-run bit for bit)."""
    versions = {"kernels_helpers": _version("shearbook")}
    versions.update({d: _version(d) for d in DEPENDENCIES})
    return {
        "raw_files": {r.relpath: {"sha256": r.sha256, "size_bytes": r.size_bytes} for r in readings.values()}
        | {s.consolidation.relpath: {"sha256": sha256_of(s.consolidation.file),
                                     "size_bytes": s.consolidation.file.stat().st_size}
           for s in project.stages if s.consolidation is not None and s.consolidation.file.is_file()},
        "interpretation_sha256": interpretation.sha256 if interpretation is not None else None,
        "versions": versions,
        "python": sys.version.split()[0],
        "platform": platform.platform(),
    }


@functools.cache  # a metadata look-up costs milliseconds; the live workbook refits on every drag
def _version(dist: str) -> str:
    try:
        return importlib.metadata.version(dist)
    except importlib.metadata.PackageNotFoundError:
        return "not installed"


def interpret(project: Project | str | Path, interpretation: Interpretation | str | Path | None = None) -> Results:
    """Compute all results of ``project`` under ``interpretation``.

    Parameters
    ----------
    project
        A :class:`Project` or the path of a project folder.
    interpretation
        An :class:`Interpretation`, the path of an interpretation file, or None for the project's
        own ``interpretation.json`` (all suggestions when it does not exist yet).
    """
    proj = project if isinstance(project, Project) else load_project(project)
    if interpretation is None:
        interpretation = proj.root / INTERPRETATION_FILE
    interp = interpretation if isinstance(interpretation, Interpretation) else load_interpretation(interpretation)
    where = "the interpretation" if isinstance(interpretation, Interpretation) else str(interpretation)
    check_stage_ids(interp, [s.id for s in proj.stages], where)
    readings = read_all(proj)
    analysed: list[StageResult] = []
    origin: float | None = None
    for spec, part, continued in stage_units(proj, readings):
        try:
            result = analyse_stage(spec, part, interp.decision(spec.id), interp.settings,
                                   interp.raw_files.get(spec.relpath), origin if continued else None,
                                   saved_files=interp.raw_files)
        except InterpretationFileError as exc:  # a manual pick that does not fit the curve: name the file
            raise InterpretationFileError(f"{where}: {exc}") from None
        if not continued:
            origin = result.reduced.seating_shift_mm
        analysed.append(result)
    return assemble_results(proj, readings, interp, tuple(analysed))


def assemble_results(proj: Project, readings: Mapping[str, StageReadings], interp: Interpretation,
                     analysed: tuple[StageResult, ...]) -> Results:
    """Results from stage results as :func:`analyse_stage` gives them (before :func:`pair_flags`).

    The tail of :func:`interpret`; the live workbook calls it after re-analysing only the stage
    that changed, so both give the same results for the same interpretation.
    """
    stages = pair_flags(analysed)
    envelopes = fit_envelopes(stages, interp.settings.fit)
    stages = outlier_flags(stages, envelopes, interp.settings.fit.outlier_level)
    return Results(
        project={"name": proj.name, **dict(proj.meta)},
        conventions={
            "area": interp.settings.reduction.area_convention,
            "units": {"length": "mm", "force": "N", "stress": "kPa", "time": "s", "angle": "degree"},
            "vertical_displacement": "positive for dilation",
            "horizontal_displacement": "positive in the direction of shearing, seating slack removed",
        },
        settings=interp.settings.to_dict(),
        stages=stages,
        envelopes=envelopes,
        provenance=provenance(proj, readings, interp),
        sensitivity=tuple(row for e in envelopes for row in leave_one_out(e, interp.settings.fit.level)),
        **derive(stages, envelopes, interp.design, proj.design_stress_range_kpa,
                 {s.id: s.specimen.relative_density for s in proj.stages}, interp.settings.fit.through_origin),
    )
