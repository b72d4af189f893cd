"""Calibrations: dial-gauge and proving-ring divisions (or an apparatus input) to physical values.

A calibration is a plain record of the project file (:class:`.project.CalibrationSpec`); this module
evaluates it on readings:

* linear: value = offset + factor x input;
* table: the certificate's points joined by a monotone piecewise cubic Hermite interpolant (PCHIP,
  Fritsch and Carlson 1980, scipy's ``PchipInterpolator``): it passes through every point and, with
  values that only rise (or only fall), never overshoots between them as a cubic spline can;
* polynomial: value = c0 + c1 x + c2 x^2 + ...

Inputs outside the calibrated range are evaluated all the same (a table is extended by the slope at its
end; a polynomial as it is) and reported by :func:`outside_range`, so that the reading is flagged.
BS 1377-1:2016 cl. 4.4 and ISO 17892-10:2018 cl. 5 require measuring devices to be calibrated over
their working range (from memory); a value beyond that range is not a calibrated value.
"""

from __future__ import annotations

import numpy as np
from scipy.interpolate import PchipInterpolator

from .project import CalibrationSpec

__all__ = ["evaluate", "outside_range", "range_note"]


def evaluate(cal: CalibrationSpec, x: np.ndarray) -> np.ndarray:
    """The calibrated values (in ``cal.output_unit``) of the inputs ``x`` (in ``cal.input_unit``)."""
    x = np.asarray(x, dtype=float)
    if cal.kind == "linear":
        return cal.offset + cal.factor * x
    if cal.kind == "polynomial":
        return np.asarray(np.polynomial.polynomial.polyval(x, np.asarray(cal.coefficients, dtype=float)), dtype=float)
    xs, ys = np.asarray(cal.inputs, dtype=float), np.asarray(cal.values, dtype=float)
    inside = PchipInterpolator(xs, ys, extrapolate=False)
    out = inside(np.clip(x, xs[0], xs[-1]))
    slope_lo = (ys[1] - ys[0]) / (xs[1] - xs[0])  # beyond the table: the straight line of its end segment
    slope_hi = (ys[-1] - ys[-2]) / (xs[-1] - xs[-2])
    out = np.where(x < xs[0], ys[0] + slope_lo * (x - xs[0]), out)
    return np.asarray(np.where(x > xs[-1], ys[-1] + slope_hi * (x - xs[-1]), out), dtype=float)


def outside_range(cal: CalibrationSpec, x: np.ndarray) -> np.ndarray:
    """Which inputs lie outside the range the calibration was made over."""
    x = np.asarray(x, dtype=float)
    return (x < cal.range[0]) | (x > cal.range[1])


def range_note(cal: CalibrationSpec, x: np.ndarray, what: str, where: str) -> str | None:
    """A flag for readings outside the calibrated range, naming how many, the extreme and where; else None."""
    out = outside_range(cal, x)
    if not out.any():
        return None
    worst = float(x[out][np.argmax(np.abs(x[out] - np.mean(cal.range)))])
    return (f"{what}: {int(out.sum())} reading(s) outside the calibrated range {cal.range[0]:g}-{cal.range[1]:g} "
            f"{cal.input_unit} of calibration {cal.name!r} (furthest {worst:g} {cal.input_unit}, first {where}); "
            "they are converted by extending the calibration and are not calibrated values")
