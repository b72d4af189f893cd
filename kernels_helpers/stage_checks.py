"""All checks of one reduced stage, gathered for the pipeline: flags, consolidation and rate.

Pure apart from reading the stage's consolidation file (read only, like every raw file).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .checks import normal_load_flags, phase_flags, size_flags, spike_flags, transducer_flags
from .consolidation import ConsolidationResult, RateCheck, analyse_consolidation, rate_check
from .project import StageSpec
from .readings import StageReadings, read_consolidation
from .reduce import ReducedStage
from .settings import PickSettings

__all__ = ["Consolidation", "StageChecks", "check_stage", "consolidation_of"]


@dataclass(frozen=True)
class StageChecks:
    """Flags in words, the consolidation stage's analysis and the drained-rate check (when possible)."""

    flags: tuple[str, ...]
    consolidation: ConsolidationResult | None
    consolidation_sha256: str | None
    rate: RateCheck | None
    unreliable: tuple[str, ...] = ()  # results that depend on a faulty channel (transducer_flags)


def _normal_force(spec: StageSpec, readings: StageReadings) -> np.ndarray | None:
    t = readings.table
    if "normal_force_n" in t:
        return t["normal_force_n"].to_numpy()
    if "normal_stress_nominal_kpa" in t:
        return t["normal_stress_nominal_kpa"].to_numpy() * spec.specimen.area0_mm2 / 1000.0
    return None


@dataclass(frozen=True)
class Consolidation:
    """A stage's consolidation readings and their analysis: read first, as the reduction needs them."""

    readings: StageReadings
    result: ConsolidationResult


def consolidation_of(spec: StageSpec) -> Consolidation | None:
    """Read and analyse the stage's consolidation readings (None when the project gives none)."""
    cons_readings = read_consolidation(spec)
    if cons_readings is None:
        return None
    t = cons_readings.table
    return Consolidation(cons_readings, analyse_consolidation(t["time_s"].to_numpy(), -t["y_mm"].to_numpy(),
                                                              spec.specimen.height_mm,
                                                              spec.specimen.consolidation_settlement_mm))


def check_stage(spec: StageSpec, readings: StageReadings, reduced: ReducedStage, x_failure_mm: float,
                time_to_failure: str = "largest", consolidation: Consolidation | None = None,
                picks: PickSettings | None = None) -> StageChecks:
    """Every check of one stage; ``x_failure_mm`` is where failure was picked (for the rate check).

    ``time_to_failure``: the rule of the rate check (:class:`.settings.RateSettings`);
    ``consolidation``: from :func:`consolidation_of` (read before the reduction).
    """
    c = reduced.curve
    in_shear = c["in_shear"].to_numpy()
    flags = [*readings.notes]
    if "spike" in c:
        flags += spike_flags(c["spike"].to_numpy(dtype=bool), readings.line, "shear stress or vertical displacement")
    flags += size_flags(spec)
    flags += phase_flags(spec, reduced.e_initial, reduced.e_start, float(np.nanmin(c["e"].to_numpy())))
    flags += normal_load_flags(spec, _normal_force(spec, readings), in_shear, readings.line)
    first = int(np.argmax(in_shear)) if in_shear.any() else 0
    shear = c.iloc[first:]
    faults, unreliable = transducer_flags(
        {"horizontal displacement": shear["x_mm"].to_numpy(), "vertical displacement": shear["y_mm"].to_numpy(),
         "shear force": shear["tau_kpa"].to_numpy() * shear["area_mm2"].to_numpy()},
        lambda row: readings.line(first + row), float(np.ptp(shear["x_mm"].to_numpy())) if len(shear) else 0.0,
        picks)
    flags += faults
    timed = bool(np.isfinite(c["time_s"].to_numpy()).all())
    if not timed:
        flags.append("drained-rate check not possible: the readings have no time column (a sheet read at intervals "
                     "of displacement); state the rate of shearing from the laboratory's record")
    if consolidation is None:
        return StageChecks(tuple(flags), None, None, None, tuple(unreliable))
    cons_readings, result = consolidation.readings, consolidation.result
    relpath = spec.consolidation.relpath  # type: ignore[union-attr]
    flags += [f"consolidation stage ({relpath}): {f}" for f in result.flags]
    rows = np.flatnonzero(in_shear & (c["pass_no"].to_numpy() == 1) if "pass_no" in c else in_shear)
    rate = None
    if rows.size >= 3 and timed:
        x = c["x_mm"].to_numpy()
        failure = int(rows[np.argmin(np.abs(x[rows] - x_failure_mm))])
        rate = rate_check(c["time_s"].to_numpy(), x, int(rows[0]), failure, result, time_to_failure)
        if rate is not None and rate.flag:
            flags.append(rate.flag)
        if rate is None and time_to_failure != "largest":
            flags.append(f"no drained-rate check: the rule t_f = {time_to_failure} chosen in the settings needs a "
                         f"time the consolidation stage ({relpath}) did not give")
    return StageChecks(tuple(flags), result, cons_readings.sha256, rate, tuple(unreliable))
