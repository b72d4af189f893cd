"""The results object: everything :func:`kernels_helpers.interpret` computes, as plain records.

``Results.to_dict()`` is the documented JSON form (schema ``shearbook.results/1``); it holds no
time stamp, so two runs on the same inputs and versions give identical text.
"""

from __future__ import annotations

import dataclasses
import json
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Generic, TypeVar

import numpy as np

from .apparatus import Correction
from .compare import SetComparison
from .consolidation import ConsolidationResult, RateCheck, consolidation_dict
from .critical_state import CriticalStateLine
from .decisions import Cohesion, DesignChoices, DesignKind, PickKind, Source
from .design import DESIGN_CAUTION, DesignValues, RegressionCharacteristic, TanPhiStatistics
from .dilatancy import StageDilatancy
from .envelope import CurvatureComparison, LineFit, PowerLawFit
from .mime import INTERPRETATION_MIME, RESULTS_MIME  # noqa: F401  (re-exported)
from .picks import PointValues, WindowValues
from .reduce import ReducedStage
from .reversal import PassStress, Residual

__all__ = ["DesignResult", "EnvelopeBands", "EnvelopeResult", "EnvelopeStatistics", "LeaveOneOut", "Results",
           "StagePick", "StageResult", "plain"]

RESULTS_SCHEMA = "shearbook.results/1"

V = TypeVar("V", PointValues, WindowValues, Residual)


@dataclass(frozen=True)
class StagePick(Generic[V]):
    """One pick of a stage, as computed: the rule's suggestion, the pick in use, where it comes from and why.

    ``chosen`` is the engineer's pick where ``source`` is "manual" (``note`` their reason), else the suggestion.
    The values are :class:`~.picks.PointValues` for the peak, :class:`~.picks.WindowValues` for the critical
    state and :class:`~.reversal.Residual` for the residual of a reversal test.
    """

    source: Source
    suggested: V
    chosen: V
    note: str = ""


@dataclass(frozen=True)
class StageResult:
    """One stage: its reduction, the suggested and the chosen picks, and its flags."""

    stage_id: str
    test_set: str
    stratum: str
    relpath: str
    sha256: str
    size_bytes: int
    reduced: ReducedStage
    included: bool
    exclusion_reason: str
    note: str
    peak: StagePick[PointValues]
    no_distinct_peak: str | None  # reason in words, or None when the peak is distinct
    critical_state: StagePick[WindowValues]
    flags: tuple[str, ...]
    stale: bool  # the raw file changed since the interpretation was saved
    passes: tuple[PassStress, ...] = ()  # reversal tests: the stress at the end of every pass
    residual: StagePick[Residual] | None = None  # reversal tests: the residual strength (suggested or manual)
    consolidation: ConsolidationResult | None = None  # the consolidation stage's readings, when given
    rate: RateCheck | None = None  # required time to failure against the actual test
    unreliable: tuple[str, ...] = ()  # results that depend on a faulty transducer channel (checks.transducer_flags)
    corrections: tuple[Correction, ...] = ()  # apparatus corrections, stated at the peak (apparatus.py)
    critical_state_used: bool = False  # put back in the critical-state fit by the engineer although not reached
    critical_state_reason: str = ""

    @property
    def critical_state_left_out(self) -> str | None:
        """Why the critical state takes no part in the critical-state envelope and line (None: it does)."""
        unreached = [f for f in self.critical_state.chosen.flags if f.startswith("critical state not reached")]
        if not unreached or self.critical_state_used:
            return None
        return ("left out of the critical-state envelope and line (" + "; ".join(unreached) + "); put it back "
                "in with a reason if the engineer judges it close enough")

    @property
    def sigma_nominal_kpa(self) -> float:
        """Normal stress on the nominal (initial) area, kPa: the stage's label."""
        return self.reduced.normal_force_n / self.reduced.area0_mm2 * 1000.0

    def strength(self, kind: PickKind) -> PointValues | WindowValues | Residual | None:
        """The values of the pick in use of one kind ("peak", "critical_state", "residual"): its sigma_kpa and
        tau_kpa (None: a stage that is not a reversal test has no residual)."""
        pick = self.pick(kind)
        return None if pick is None else pick.chosen

    def pick(self, kind: PickKind) -> StagePick[Any] | None:
        """The pick of one kind (None: a stage that is not a reversal test has no residual)."""
        if kind not in ("peak", "critical_state", "residual"):
            raise KeyError(kind)
        pick: StagePick[Any] | None = getattr(self, kind)
        return pick

    def in_group(self, group: str) -> bool:
        """Whether the stage belongs to envelope group ``group``: its test set, or its stratum pooled."""
        return group in (self.test_set or "all stages", f"stratum {self.stratum} (all sets)")


@dataclass(frozen=True)
class EnvelopeResult:
    """One envelope (peak or critical state) through one group of stages."""

    group: str
    kind: PickKind
    stage_ids: tuple[str, ...]
    sigma_kpa: tuple[float, ...]
    tau_kpa: tuple[float, ...]
    free: LineFit | None
    origin: LineFit | None
    reported: Cohesion  # which fit gives the reported c' and phi' (written "free" or "zero" in the results)
    not_fitted: str | None = None

    @property
    def chosen(self) -> LineFit | None:
        return self.origin if self.reported == Cohesion.ORIGIN else self.free


def _fit_dict(fit: LineFit | None) -> dict[str, Any] | None:
    if fit is None:
        return None
    d = dataclasses.asdict(fit)
    d.update(
        phi_deg=fit.phi_deg,
        phi_interval_deg=list(fit.phi_interval_deg),
        c_kpa=fit.intercept,
        c_interval_kpa=list(fit.c_interval_kpa),
        negative_cohesion=fit.negative_cohesion,
        residuals=list(fit.residuals),
    )
    return d


def _point(p: PointValues) -> dict[str, Any]:
    d = dataclasses.asdict(p)
    d["ratio"] = p.ratio
    d["phi_secant_deg"] = math.degrees(math.atan(p.ratio))
    return d


def _window(w: WindowValues) -> dict[str, Any]:
    d = dataclasses.asdict(w)
    d["flags"] = list(w.flags)
    d["ratio"] = w.ratio
    d["phi_secant_deg"] = math.degrees(math.atan(w.ratio))
    return d


def _derived_dict(r: Results) -> dict[str, Any]:
    """JSON form of the fields made by ``derived.py`` (documented in the contributor guide)."""
    return {
        "envelope_statistics": plain(r.envelope_statistics),
        "set_comparisons": plain(r.set_comparisons),
        "critical_state_lines": plain(r.critical_state_lines),
        "dilatancy": plain(r.dilatancy),
        "design": plain(r.design),
    }


def plain(obj: Any) -> Any:
    """A dataclass (with its numeric properties) as JSON-ready data; NaN becomes None."""
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        out = {f.name: plain(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
        for name in dir(type(obj)):
            if isinstance(getattr(type(obj), name, None), property):
                out[name.rstrip("_")] = plain(getattr(obj, name))
        return out
    if isinstance(obj, Mapping):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, tuple | list | np.ndarray):
        return [plain(v) for v in obj]
    if isinstance(obj, float | np.floating):
        return float(obj) if math.isfinite(obj) else None
    if isinstance(obj, np.integer):
        return int(obj)
    return obj


@dataclass(frozen=True)
class EnvelopeBands:
    """Two-sided bands of one fit on a grid of normal stress (kPa), at ``level``."""

    fit: str  # "free" or "origin"
    level: float
    sigma_kpa: tuple[float, ...]
    line_kpa: tuple[float, ...]
    mean_lower_kpa: tuple[float, ...]
    mean_upper_kpa: tuple[float, ...]
    prediction_lower_kpa: tuple[float, ...]
    prediction_upper_kpa: tuple[float, ...]


@dataclass(frozen=True)
class EnvelopeStatistics:
    """Extra statistics of one envelope: secant angles, bands, the power law and the curvature check."""

    group: str
    kind: PickKind
    stage_ids: tuple[str, ...]
    secant_phi_deg: tuple[float, ...]  # per stage, in the order of stage_ids
    bands: tuple[EnvelopeBands, ...]
    power: PowerLawFit | None
    power_phi_secant_deg: tuple[float, ...]  # at each stage's normal stress
    power_phi_tangent_deg: tuple[float, ...]
    curvature: CurvatureComparison | None
    power_not_fitted: str | None = None


@dataclass(frozen=True)
class DesignResult:
    """Characteristic and design values under the engineer's :class:`DesignChoices`."""

    choices: DesignChoices
    group: str
    kind: DesignKind
    stress_range_kpa: tuple[float, float] | None
    range_source: str
    fit_used: str | None  # "free" or "origin"
    characteristic: RegressionCharacteristic | None
    c_k_kpa: float | None
    tan_phi_k: float | None
    method: str
    tan_phi_statistics: TanPhiStatistics | None
    design: tuple[DesignValues, ...]  # the chosen set first, then the Table A.4 sets not chosen
    parameter_note: str
    flags: tuple[str, ...]
    not_derived: str | None = None
    caution: str = DESIGN_CAUTION

    @property
    def phi_k_deg(self) -> float | None:
        return None if self.tan_phi_k is None else math.degrees(math.atan(self.tan_phi_k))


@dataclass(frozen=True)
class LeaveOneOut:
    """The envelope of ``group``/``kind`` refitted without ``left_out`` (angles deg, c' kPa).

    ``phi_deg``/``c_kpa`` are for c' free (``method`` says how they were found, or why there is
    no value), ``phi_origin_deg`` for the through-origin fit; changes are against the full set.
    """

    group: str
    kind: PickKind
    left_out: str
    n_left: int
    method: str
    phi_deg: float | None
    c_kpa: float | None
    phi_change_deg: float | None
    c_change_kpa: float | None
    phi_origin_deg: float | None
    phi_origin_change_deg: float | None


@dataclass(frozen=True)
class Results:
    """All results of one interpretation of one project."""

    project: Mapping[str, Any]
    conventions: Mapping[str, Any]
    settings: Mapping[str, Any]
    stages: tuple[StageResult, ...]
    envelopes: tuple[EnvelopeResult, ...]
    provenance: Mapping[str, Any]
    sensitivity: tuple[LeaveOneOut, ...] = ()  # leave-one-out refits of every reported envelope
    # derived.py: bands and curved fits per envelope, sets vs pooled, critical-state lines, dilatancy, design
    envelope_statistics: tuple[EnvelopeStatistics, ...] = ()
    set_comparisons: tuple[SetComparison, ...] = ()
    critical_state_lines: tuple[CriticalStateLine, ...] = ()
    dilatancy: tuple[StageDilatancy, ...] = ()
    design: DesignResult | None = None

    def statistics(self, group: str, kind: PickKind) -> EnvelopeStatistics:
        for e in self.envelope_statistics:
            if e.group == group and e.kind == kind:
                return e
        raise KeyError((group, kind))

    def stage(self, stage_id: str) -> StageResult:
        for s in self.stages:
            if s.stage_id == stage_id:
                return s
        raise KeyError(stage_id)

    def envelope(self, group: str, kind: PickKind) -> EnvelopeResult:
        for e in self.envelopes:
            if e.group == group and e.kind == kind:
                return e
        raise KeyError((group, kind))

    def to_dict(self) -> dict[str, Any]:
        stages = []
        for s in self.stages:
            r = s.reduced
            stages.append(
                {
                    "id": s.stage_id,
                    "test_set": s.test_set,
                    "stratum": s.stratum,
                    "file": s.relpath,
                    "sha256": s.sha256,
                    "size_bytes": s.size_bytes,
                    "stale": s.stale,
                    "normal_force_n": r.normal_force_n,
                    "sigma_nominal_kpa": s.sigma_nominal_kpa,
                    "e_initial": r.e_initial,
                    "e_start": r.e_start,
                    "void_ratio_chain": {  # how e at the start of shearing was reached, step by step
                        "height_initial_mm": r.height_initial_mm, "settlement_mm": r.settlement_mm,
                        "settlement_source": r.settlement_source, "height_start_mm": r.height_start_mm,
                        "height_of_solids_mm": r.hs_mm, "e_initial": r.e_initial, "e_start": r.e_start},
                    "seating_shift_mm": r.seating_shift_mm,
                    "n_readings": len(r.curve),
                    "included": s.included,
                    "exclusion_reason": s.exclusion_reason,
                    "note": s.note,
                    "peak": {
                        "source": s.peak.source,
                        "note": s.peak.note,
                        "no_distinct_peak": s.no_distinct_peak,
                        "suggested": _point(s.peak.suggested),
                        "chosen": _point(s.peak.chosen),
                    },
                    "critical_state": {
                        "source": s.critical_state.source,
                        "note": s.critical_state.note,
                        "left_out": s.critical_state_left_out,
                        "used_although_not_reached": s.critical_state_reason if s.critical_state_used else None,
                        "suggested": _window(s.critical_state.suggested),
                        "chosen": _window(s.critical_state.chosen),
                    },
                    "flags": list(s.flags),
                    "unreliable": list(s.unreliable),
                    "passes": [{**dataclasses.asdict(p), "ratio": p.ratio} for p in s.passes],
                    "residual": None if s.residual is None else {
                        **dataclasses.asdict(s.residual.chosen), "source": s.residual.source,
                        "suggested": dataclasses.asdict(s.residual.suggested)},
                    "consolidation": consolidation_dict(s.consolidation),
                    "rate_check": None if s.rate is None else dataclasses.asdict(s.rate),
                    **({"apparatus_corrections": [{**dataclasses.asdict(c), "flagged": c.flagged}
                                                  for c in s.corrections]} if s.corrections else {}),
                }
            )
        envelopes = [
            {
                "group": e.group,
                "kind": e.kind,
                "stage_ids": list(e.stage_ids),
                "sigma_kpa": list(e.sigma_kpa),
                "tau_kpa": list(e.tau_kpa),
                "reported": e.reported,
                "not_fitted": e.not_fitted,
                "free": _fit_dict(e.free),
                "origin": _fit_dict(e.origin),
            }
            for e in self.envelopes
        ]
        return {
            "schema": RESULTS_SCHEMA,
            "project": dict(self.project),
            "conventions": dict(self.conventions),
            "settings": dict(self.settings),
            "stages": stages,
            "envelopes": envelopes,
            "provenance": dict(self.provenance),
            "sensitivity": [dataclasses.asdict(r) for r in self.sensitivity],
            **_derived_dict(self),
        }

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False) + "\n"
