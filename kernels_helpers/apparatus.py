"""Apparatus corrections: box friction, the proving ring's own deflection, the lid's weight, compliance.

Each correction is computed per reading from the stage's readings (canonical units, after any
calibration), applied to them, and kept as a plain array so that its size at the peak can be stated
beside the result. The raw readings file is never changed.

* Box friction: an empty-box run gives the force needed to move the box halves against each other at
  each displacement; it is subtracted from the measured shear force, with the sign of the direction of
  travel (friction opposes the movement). BS 1377-7:1990 cl. 4.4.3.2 and ISO 17892-10:2018 cl. 5.2
  ask for the apparatus friction to be determined and allowed for (from memory).
* Proving ring deflection: when the horizontal displacement is measured at the drive, the ring's own
  compression (its dial's divisions x mm per division) is not movement of the box and is taken out.
* Lid, loading pad and hanger: their weight bears on the specimen; it is added to the normal load when
  the project file is read (project.py) and stated here.
* Vertical compliance: a calibration with a steel dummy gives the apparatus deflection against normal
  load. A change of normal load during shearing changes it; the change is taken out of the vertical
  readings. The deflection at the stage's load is taken out of a consolidation settlement measured
  from the consolidation readings (a settlement declared in the project file is the laboratory's value
  and is left as it is).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .calibration import evaluate, range_note
from .project import G_N, ApparatusSpec, StageSpec
from .units import to_canonical_factor

__all__ = ["CORRECTION_PREFIX", "MEASURED_PREFIX", "Correction", "apply_corrections", "compliance_at",
           "correction_flags", "corrections_at"]

# the readings table keeps, per reading, each amount applied ("correction:<name>") and the value as measured
# ("measured:<column>"): a multi-stage split slices them with the readings, so they stay aligned
CORRECTION_PREFIX = "correction:"
MEASURED_PREFIX = "measured:"


@dataclass(frozen=True)
class Correction:
    """One apparatus correction of a stage, stated at the peak (or for the whole stage when constant)."""

    name: str
    method: str
    unit: str
    at_peak: float  # the amount at the peak reading (subtracted, except the lid weight which is added)
    measured_at_peak: float  # the value it corrects, as measured, at the same reading
    share: float | None  # |at_peak| / |measured_at_peak|; None when the measured value is zero
    limit: float  # the share above which it is flagged

    @property
    def flagged(self) -> bool:
        return self.at_peak != 0 if self.share is None else self.share > self.limit


def _direction(x: np.ndarray) -> np.ndarray:
    """+1 while the box moves forward, -1 on a return pass (the sign friction takes)."""
    step = np.gradient(x) if len(x) > 1 else np.zeros_like(x)
    sign = np.sign(step)
    for i in range(len(sign)):  # a reading that does not move keeps the direction before it
        if sign[i] == 0:
            sign[i] = sign[i - 1] if i else 1.0
    return np.asarray(sign, dtype=float)


def apply_corrections(spec: StageSpec, table: pd.DataFrame) -> tuple[pd.DataFrame, tuple[str, ...]]:
    """The readings table with the stage's apparatus corrections applied (and kept as columns), and flags."""
    app = spec.apparatus
    if app is None:
        return table, ()
    out, arrays, notes = table.copy(), {}, []
    for column in ("x_mm", "shear_force_n", "y_mm"):
        if column in out:
            out[MEASURED_PREFIX + column] = out[column].to_numpy()
    if app.horizontal_measured_at == "drive" and app.ring_dial_mm_per_div and "shear_force_n_div" in out:
        deflection = out["shear_force_n_div"].to_numpy() * app.ring_dial_mm_per_div
        out["x_mm"] = out["x_mm"].to_numpy() - deflection
        arrays["proving ring deflection"] = deflection
    if app.box_friction is not None and "shear_force_n" in out:
        x = out["x_mm"].to_numpy()
        travel = np.abs(x - x[0])
        note = range_note(app.box_friction, travel, "box friction (empty-box calibration)",
                          "in the travel of this stage")
        notes += [note] if note else []
        friction = evaluate(app.box_friction, travel) * _direction(x) * _to_newton(app)
        out["shear_force_n"] = out["shear_force_n"].to_numpy() - friction
        arrays["box friction"] = friction
    if app.vertical_compliance is not None:
        normal = (out["normal_force_n"].to_numpy() if "normal_force_n" in out
                  else np.full(len(out), spec.normal_load.force_n))
        change = compliance_at(app, normal) - compliance_at(app, np.array([normal[0]]))[0]
        out["y_mm"] = out["y_mm"].to_numpy() + change  # the apparatus compressing more reads as settlement
        arrays["vertical compliance (change during shearing)"] = change
    for name, amount in arrays.items():
        out[CORRECTION_PREFIX + name] = amount
    return out, tuple(notes)


def _to_newton(app: ApparatusSpec) -> float:
    assert app.box_friction is not None
    return to_canonical_factor(app.box_friction.output_unit, "shear_force", "box friction")


def compliance_at(app: ApparatusSpec, normal_force_n: np.ndarray) -> np.ndarray:
    """The apparatus deflection (mm) at the normal forces given (N), from its steel-dummy calibration."""
    assert app.vertical_compliance is not None
    mm = to_canonical_factor(app.vertical_compliance.output_unit, "vertical_displacement", "vertical compliance")
    return evaluate(app.vertical_compliance, np.asarray(normal_force_n, dtype=float)) * mm


MEASURED = {"proving ring deflection": ("x_mm", "mm"), "box friction": ("shear_force_n", "N"),
            "vertical compliance (change during shearing)": ("y_mm", "mm")}  # the column each corrects, its unit
METHOD = {"proving ring deflection": "ring dial divisions x {mm:g} mm/div, taken out of the drive displacement",
          "box friction": "empty-box calibration {cal}, subtracted from the shear force",
          "vertical compliance (change during shearing)": "steel-dummy calibration {cal}: the change of apparatus "
                                                          "deflection with normal load, taken out"}


def corrections_at(spec: StageSpec, table: pd.DataFrame, row: int,
                   settlement_mm: tuple[float, float] | None = None) -> tuple[Correction, ...]:
    """Every correction of the stage at reading ``row`` (the peak), with its share of the measured value.

    ``table``: the stage's readings as :func:`apply_corrections` left them; ``settlement_mm``: the
    compliance taken out of the consolidation settlement and the settlement as measured.
    """
    app = spec.apparatus
    if app is None:
        return ()
    out: list[Correction] = []
    for key in [c for c in table.columns if c.startswith(CORRECTION_PREFIX)]:
        name = key[len(CORRECTION_PREFIX):]
        column, unit = MEASURED[name]
        measured_all = table[MEASURED_PREFIX + column].to_numpy()
        measured = float(measured_all[row])
        if column in ("x_mm", "y_mm"):  # a displacement is judged against the movement, not its position
            measured = float(measured_all[row] - measured_all[0])
        value = float(table[key].to_numpy()[row])
        cal = app.box_friction if name == "box friction" else app.vertical_compliance
        method = METHOD[name].format(mm=app.ring_dial_mm_per_div or 0.0, cal=cal.name if cal else "")
        out.append(Correction(name, method, unit, value, measured, _share(value, measured), app.flag_share))
    if app.lid_mass_g:
        lid = app.lid_mass_g / 1000.0 * G_N
        out.append(Correction("lid, pad and hanger weight", f"{app.lid_mass_g:g} g x g_n, added to the normal load",
                              "N", lid, spec.normal_load.force_n - lid, _share(lid, spec.normal_load.force_n - lid),
                              app.flag_share))
    if settlement_mm is not None:
        assert app.vertical_compliance is not None
        out.append(Correction("vertical compliance at the stage's load",
                              f"steel-dummy calibration {app.vertical_compliance.name}: the apparatus deflection "
                              "at the normal load, taken out of the consolidation settlement", "mm",
                              settlement_mm[0], settlement_mm[1], _share(*settlement_mm), app.flag_share))
    return tuple(out)


def _share(value: float, measured: float) -> float | None:
    return abs(value) / abs(measured) if measured and np.isfinite(measured) else None


def correction_flags(corrections: tuple[Correction, ...]) -> list[str]:
    """A flag for each correction larger than its stated share of the measured value."""
    return [f"apparatus correction large: {c.name} {c.at_peak:.3g} {c.unit} at the peak is "
            + (f"{c.share * 100:.1f} %" if c.share is not None else "all") + f" of the measured "
            f"{c.measured_at_peak:.4g} {c.unit} (flagged above {c.limit * 100:g} %, flag_share); check the "
            "calibration and the apparatus" for c in corrections if c.flagged]
