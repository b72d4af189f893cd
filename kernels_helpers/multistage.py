"""Multi-stage tests: one specimen sheared in turn at several normal stresses.

The stages are found from the normal-load history in the readings (a normal force or normal stress
column is required): a stage is a run of at least ``min_rows`` readings whose normal force stays
within ``tolerance`` of the run's median. Readings between runs (the load being changed) belong to
no stage and are left out of every stage, but stay in the raw file.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from .errors import ReadingsError
from .project import NormalLoad, StageSpec
from .readings import StageReadings

__all__ = ["LoadStep", "expand_multistage", "split_by_normal_load"]


@dataclass(frozen=True)
class LoadStep:
    """Rows ``start`` to ``stop`` (exclusive) of the file, sheared under ``force_n`` (median)."""

    start: int
    stop: int
    force_n: float


def split_by_normal_load(normal_force_n: np.ndarray, min_rows: int = 50,
                         tolerance: float = 0.03) -> tuple[LoadStep, ...]:
    """Runs of steady normal force (see the module docstring), in file order."""
    f = np.asarray(normal_force_n, dtype=float)
    steps: list[LoadStep] = []
    start = 0
    while start < len(f):
        level = f[start]
        stop = start + 1
        while stop < len(f) and abs(f[stop] - level) <= tolerance * abs(level):
            stop += 1
            if stop - start in (10, 50, 200):  # settle the level on the run's median as it grows
                level = float(np.median(f[start:stop]))
        if stop - start >= min_rows:
            steps.append(LoadStep(start, stop, float(np.median(f[start:stop]))))
        start = stop
    return tuple(steps)


def _normal_force(spec: StageSpec, readings: StageReadings) -> np.ndarray:
    t = readings.table
    if "normal_force_n" in t:
        return t["normal_force_n"].to_numpy()
    if "normal_stress_nominal_kpa" in t:
        return t["normal_stress_nominal_kpa"].to_numpy() * spec.specimen.area0_mm2 / 1000.0
    raise ReadingsError(
        f"{spec.file}: stage {spec.id!r} is a multi-stage test but the column map has no normal_force or "
        "normal_stress column; the stages are found from the normal-load history. Map that column."
    )


def expand_multistage(spec: StageSpec, readings: StageReadings) -> list[tuple[StageSpec, StageReadings, bool]]:
    """The stages of a multi-stage test as ordinary stages ``ID/1``, ``ID/2``, ...

    Each gets the median normal force of its run, and a consolidation settlement such that its
    height at the start is the specimen's height there (the vertical readings run on across the
    stages). The third item says whether the stage continues from the previous one's displacement
    (True) or the box was returned to the start (False, within 0.5 mm of the first stage's start).
    """
    steps = split_by_normal_load(_normal_force(spec, readings))
    if len(steps) < 2:
        raise ReadingsError(
            f"{spec.file}: stage {spec.id!r} is declared multi-stage but its normal-load history shows "
            f"{len(steps)} steady load step(s); check the normal force column or declare it single-stage."
        )
    t = readings.table
    y0 = float(t["y_mm"].iloc[0])
    x_first = float(t["x_mm"].iloc[steps[0].start])
    out = []
    for k, step in enumerate(steps, start=1):
        part = t.iloc[step.start : step.stop].reset_index(drop=True)
        settled = (spec.specimen.consolidation_settlement_mm or 0.0) - (float(part["y_mm"].iloc[0]) - y0)
        sub = dataclasses.replace(
            spec,
            id=f"{spec.id}/{k}",
            specimen=dataclasses.replace(spec.specimen, consolidation_settlement_mm=settled),
            normal_load=NormalLoad(step.force_n, f"stage {k} of {len(steps)} of a multi-stage test: "
                                                 f"median normal force {step.force_n:.1f} N of file rows "
                                                 f"{step.start + 1}-{step.stop}"),
            description=f"{spec.description} (stage {k} of {len(steps)})".strip(),
        )
        continued = k > 1 and float(part["x_mm"].iloc[0]) - x_first > 0.5
        lines = readings.first_data_line + step.start
        out.append((sub, dataclasses.replace(readings, stage_id=sub.id, table=part, first_data_line=lines), continued))
    return out
