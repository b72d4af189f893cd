"""The one-way pipeline: ``results = interpret(project, interpretation)``.

readings -> reduction -> suggestions -> effective picks -> envelopes -> results. Each step is a
pure function of the ones above it; nothing here reads widgets or writes files.
"""

from __future__ import annotations

import dataclasses
import importlib.metadata
import platform
import sys
from collections.abc import Iterable, Mapping
from pathlib import Path

from .envelope import fit_line, fit_through_origin
from .interpretation import INTERPRETATION_FILE, FitSettings, Interpretation, Settings, StageDecision, load_interpretation
from .picks import at_point, over_window, suggest_critical_state, suggest_peak
from .project import Project, StageSpec, load_project
from .readings import StageReadings, read_stage
from .reduce import reduce_stage
from .results import EnvelopeResult, Results, StageResult
from .sensitivity import leave_one_out

__all__ = ["analyse_stage", "fit_envelopes", "interpret", "provenance", "read_all"]

DEPENDENCIES = ("numpy", "scipy", "pandas")


def read_all(project: Project) -> dict[str, StageReadings]:
    """Read every stage's readings file (hashing the exact bytes read)."""
    return {s.id: read_stage(s) for s in project.stages}


def analyse_stage(spec: StageSpec, readings: StageReadings, decision: StageDecision, settings: Settings,
                  saved_sha256: str | None = None) -> StageResult:
    """Reduce one stage, suggest its picks and evaluate the picks the engineer chose."""
    reduced = reduce_stage(spec, readings, settings.reduction)
    cs_from, cs_to = suggest_critical_state(reduced, settings.picks)
    cs_suggested = over_window(reduced, cs_from, cs_to, settings.picks)
    choice = decision.critical_state
    if choice.source == "manual":
        assert choice.x_from_mm is not None and choice.x_to_mm is not None
        cs = over_window(reduced, choice.x_from_mm, choice.x_to_mm, settings.picks)
    else:
        cs = cs_suggested
    x_peak, no_peak = suggest_peak(reduced, cs_suggested, settings.picks)
    peak_suggested = at_point(reduced, x_peak)
    if decision.peak.source == "manual":
        assert decision.peak.x_mm is not None
        peak = at_point(reduced, decision.peak.x_mm)
        no_peak = None  # the engineer picked a peak on purpose
    else:
        peak = peak_suggested
    stale = saved_sha256 is not None and saved_sha256 != readings.sha256
    flags = list(cs.flags)
    if stale:
        manual = [k for k, c in (("peak", decision.peak), ("critical state", choice)) if c.source == "manual"]
        flags.append(
            f"raw file {spec.relpath} changed since the interpretation was saved (SHA-256 {saved_sha256[:12]}... "
            f"now {readings.sha256[:12]}...): review the {' and '.join(manual) or 'suggested'} pick(s) of this stage"
        )
    return StageResult(
        stage_id=spec.id,
        test_set=spec.test_set,
        stratum=spec.stratum,
        relpath=spec.relpath,
        sha256=readings.sha256,
        size_bytes=readings.size_bytes,
        reduced=reduced,
        included=decision.included,
        exclusion_reason=decision.exclusion_reason,
        note=decision.note,
        peak_source=decision.peak.source,
        peak_suggested=peak_suggested,
        peak=peak,
        peak_note=decision.peak.note,
        no_distinct_peak=no_peak,
        cs_source=choice.source,
        cs_suggested=cs_suggested,
        cs=cs,
        cs_note=choice.note,
        flags=tuple(flags),
        stale=stale,
    )


def _groups(stages: Iterable[StageResult]) -> dict[str, list[StageResult]]:
    """Envelope groups: each test set, and each stratum that holds more than one test set."""
    out: dict[str, list[StageResult]] = {}
    strata: dict[str, set[str]] = {}
    for s in stages:
        out.setdefault(s.test_set or "all stages", []).append(s)
        if s.stratum:
            strata.setdefault(s.stratum, set()).add(s.test_set)
    for stratum, sets in strata.items():
        if len(sets) > 1:
            out[f"stratum {stratum} (all sets)"] = [s for s in stages if s.stratum == stratum]
    return out


def _envelope(group: str, kind: str, members: list[StageResult], fit: FitSettings) -> EnvelopeResult:
    used = [s for s in members if s.included and (kind != "peak" or s.no_distinct_peak is None)]
    points = [(s.peak if kind == "peak" else s.cs) for s in used]
    sigma = tuple(p.sigma_kpa for p in points)
    tau = tuple(p.tau_kpa for p in points)
    ids = tuple(s.stage_id for s in used)
    free = fit_line(sigma, tau, fit.level) if len(used) >= 3 and len(set(sigma)) > 1 else None
    origin = fit_through_origin(sigma, tau, fit.level) if len(used) >= 2 else None
    reason = None
    reported = fit.cohesion
    if free is None:
        reason = f"{len(used)} included stage(s) with a {kind.replace('_', '-')} value: a fit with c' free needs 3 or more"
        if kind == "peak" and len(used) < len(members):
            reason += " (stages without a distinct peak and excluded stages do not count)"
        if origin is not None:
            reported = "zero"
            reason += "; the through-origin fit (c' = 0) is reported instead"
    return EnvelopeResult(group, kind, ids, sigma, tau, free, origin, reported, reason)


def fit_envelopes(stages: Iterable[StageResult], fit: FitSettings) -> tuple[EnvelopeResult, ...]:
    """Peak and critical-state envelopes for every group of stages."""
    return tuple(
        _envelope(group, kind, members, fit)
        for group, members in _groups(list(stages)).items()
        for kind in ("peak", "critical_state")
    )


def provenance(project: Project, readings: Mapping[str, StageReadings], interpretation: Interpretation) -> dict[str, object]:
    """Inputs' hashes and software versions (no time stamp: results must re-run bit for bit)."""
    versions = {"kernels_helpers": _version("shearbook")}
    versions.update({d: _version(d) for d in DEPENDENCIES})
    return {
        "raw_files": {r.relpath: {"sha256": r.sha256, "size_bytes": r.size_bytes} for r in readings.values()},
        "interpretation_sha256": interpretation.sha256,
        "versions": versions,
        "python": sys.version.split()[0],
        "platform": platform.platform(),
    }


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
    readings = read_all(proj)
    stages = tuple(
        analyse_stage(s, readings[s.id], interp.decision(s.id), interp.settings, interp.raw_files.get(s.relpath))
        for s in proj.stages
    )
    envelopes = fit_envelopes(stages, interp.settings.fit)
    return Results(
        project={"name": proj.name, **dict(proj.meta)},
        conventions={
            "area": interp.settings.reduction.area_convention,
            "units": {"length": "mm", "force": "N", "stress": "kPa", "time": "s", "angle": "degree"},
            "vertical_displacement": "positive for dilation",
            "horizontal_displacement": "positive in the direction of shearing, seating slack removed",
        },
        settings=dataclasses.asdict(interp.settings),
        stages=stages,
        envelopes=envelopes,
        provenance=provenance(proj, readings, interp),
        sensitivity=tuple(row for e in envelopes for row in leave_one_out(e, interp.settings.fit.level)),
    )
