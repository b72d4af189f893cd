"""Suggested picks on a reduced stage, and evaluation of any pick on its curve.

Rules (also stated in the contributor guide and the record):

* **Peak** - the reading of maximum lightly smoothed shear stress (Savitzky-Golay, window
  ``peak_smoothing_mm``), seating readings ignored. When that maximum exceeds the critical-state
  stress by less than ``distinct_peak_margin`` (a fraction), the stage has "no distinct peak" and
  takes no part in the peak envelope. A record that stops a short way past a clear peak, so that
  the end window reaches back over it, keeps its peak when the curve falls after it by at least
  ``distinct_peak_margin`` (wherever the window starts); its critical state is then "not reached".
* **Critical state** - the mean shear stress over the last ``critical_state_window_mm`` of travel. It is
  "reached" when, over that window, the mean rate of dilation is within ``critical_state_rate_tolerance`` of
  zero and the fitted trend of the stress ratio tau/sigma changes it by less than
  ``critical_state_trend_tolerance`` (a fraction of the mean) across the window (the ratio, not tau: on the
  corrected area both stresses grow as the contact shrinks while the strength is steady).
  Otherwise the value is still reported, with the flag "critical state not reached" and the numbers.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .reduce import ReducedStage
from .settings import PickSettings

__all__ = [
    "PickSettings",
    "PointValues",
    "WindowValues",
    "at_point",
    "over_window",
    "peak_flags",
    "suggest_critical_state",
    "suggest_peak",
]


@dataclass(frozen=True)
class PointValues:
    """The state of a stage at one reading (a peak pick)."""

    index: int  # row of the reading in the curve
    x_mm: float
    tau_kpa: float  # lightly smoothed shear stress at the reading
    tau_raw_kpa: float  # the reading itself
    sigma_kpa: float
    e: float
    dydx: float

    @property
    def ratio(self) -> float:
        return self.tau_kpa / self.sigma_kpa


@dataclass(frozen=True)
class WindowValues:
    """Means over a window of readings (a critical-state pick)."""

    x_from_mm: float
    x_to_mm: float
    n_readings: int
    tau_kpa: float
    tau_sd_kpa: float
    sigma_kpa: float
    e: float
    dydx: float
    ratio_trend_fraction: float  # change of tau/sigma across the window by a fitted line, / its mean
    flags: tuple[str, ...] = field(default=())

    @property
    def ratio(self) -> float:
        return self.tau_kpa / self.sigma_kpa


def _shear_rows(reduced: ReducedStage) -> pd.DataFrame:
    """Readings a pick may use (see :attr:`ReducedStage.pick_rows`)."""
    return reduced.pick_rows


def at_point(reduced: ReducedStage, x_mm: float) -> PointValues:
    """Values at the shearing reading nearest to ``x_mm`` (a pick snaps to the readings)."""
    rows = _shear_rows(reduced)
    i = int(np.argmin(np.abs(rows["x_mm"].to_numpy() - x_mm)))
    r = rows.iloc[i]
    return PointValues(
        index=int(rows.index[i]),
        x_mm=float(r["x_mm"]),
        tau_kpa=float(r["tau_smooth_kpa"]),
        tau_raw_kpa=float(r["tau_kpa"]),
        sigma_kpa=float(r["sigma_kpa"]),
        e=float(r["e"]),
        dydx=float(r["dydx"]),
    )


def over_window(reduced: ReducedStage, x_from_mm: float, x_to_mm: float, settings: PickSettings) -> WindowValues:
    """Means of the shearing readings with ``x_from_mm <= x <= x_to_mm``, and the steadiness flags."""
    lo, hi = sorted((x_from_mm, x_to_mm))
    rows = _shear_rows(reduced)
    x = rows["x_mm"].to_numpy()
    sel = rows[(x >= lo) & (x <= hi)]
    if len(sel) < 5:
        raise ValueError(f"window {lo:.3f}-{hi:.3f} mm holds {len(sel)} readings; it needs at least 5")
    tau = sel["tau_kpa"].to_numpy()
    ratio = sel["ratio"].to_numpy()
    xs = sel["x_mm"].to_numpy()
    mean_tau = float(np.mean(tau))
    # The trend is judged on tau/sigma: on the corrected area both stresses rise as the contact
    # area shrinks even when the soil's strength is steady.
    # least-squares slope in closed form: no rank warning when a stuck channel repeats one displacement
    dx = xs - xs.mean()
    sxx = float(dx @ dx)
    slope = float(dx @ (ratio - ratio.mean())) / sxx if sxx > 0 else 0.0
    trend = slope * (hi - lo) / float(np.mean(ratio))
    rate = float(np.mean(sel["dydx"].to_numpy()))
    flags: list[str] = []
    if abs(rate) > settings.critical_state_rate_tolerance:
        sense = "dilating" if rate > 0 else "contracting"
        flags.append(
            f"critical state not reached: still {sense}, mean dy/dx {rate:+.4f} over {lo:.2f}-{hi:.2f} mm "
            f"(tolerance {settings.critical_state_rate_tolerance:g})"
        )
    if abs(trend) > settings.critical_state_trend_tolerance:
        sense = "rising" if trend > 0 else "falling"
        flags.append(
            f"critical state not reached: stress ratio still {sense}, {trend * 100:+.1f} % across "
            f"{lo:.2f}-{hi:.2f} mm (tolerance {settings.critical_state_trend_tolerance * 100:g} %)"
        )
    return WindowValues(
        x_from_mm=lo,
        x_to_mm=hi,
        n_readings=len(sel),
        tau_kpa=mean_tau,
        tau_sd_kpa=float(np.std(tau, ddof=1)),
        sigma_kpa=float(np.mean(sel["sigma_kpa"].to_numpy())),
        e=float(np.mean(sel["e"].to_numpy())),
        dydx=rate,
        ratio_trend_fraction=trend,
        flags=tuple(flags),
    )


def suggest_critical_state(reduced: ReducedStage, settings: PickSettings) -> tuple[float, float]:
    """Suggested critical-state window: the last ``critical_state_window_mm`` of travel, as (from, to) in mm."""
    x = _shear_rows(reduced)["x_mm"].to_numpy()
    x_end = float(np.max(x))
    return max(float(np.min(x)), x_end - settings.critical_state_window_mm), x_end


def suggest_peak(reduced: ReducedStage, cs: WindowValues, settings: PickSettings) -> tuple[float, str | None]:
    """Suggested peak position (mm) and, when there is no distinct peak, the reason in words."""
    rows = _shear_rows(reduced)
    smooth = rows["tau_smooth_kpa"].to_numpy()
    score = smooth if settings.peak_rule == "tau" else smooth / rows["sigma_kpa"].to_numpy()
    i = int(np.nanargmax(score))
    x_peak = float(rows["x_mm"].iloc[i])
    excess = float(score[i]) / (cs.tau_kpa if settings.peak_rule == "tau" else cs.ratio) - 1.0
    if x_peak >= cs.x_from_mm:  # a record that stops early: the end window reaches back over the peak
        after = score[i + 1:]
        fall = float(score[i]) / float(np.nanmin(after)) - 1.0 if after.size and np.isfinite(after).any() else 0.0
        if fall < settings.distinct_peak_margin:
            return x_peak, (f"no distinct peak: the maximum shear stress lies in the critical-state window and the "
                            f"curve falls by {fall * 100:.1f} % after it (less than "
                            f"{settings.distinct_peak_margin * 100:g} %)")
        return x_peak, None
    if excess < settings.distinct_peak_margin:
        return x_peak, (
            f"no distinct peak: the maximum {'shear stress' if settings.peak_rule == 'tau' else 'stress ratio'} "
            f"exceeds the critical state by {excess * 100:.1f} % "
            f"(less than {settings.distinct_peak_margin * 100:g} %)"
        )
    return x_peak, None


def peak_flags(reduced: ReducedStage, peak: PointValues, settings: PickSettings) -> tuple[str, ...]:
    """Checks on a peak an engineer should see (REFERENCES sec. 5 and 9, common practice).

    * The peak should coincide with the maximum rate of dilation (stress-dilatancy): flagged when
      they are further apart than ``peak_dilation_offset_mm`` and a quarter of the peak displacement.
    * Stick-slip or noise: flagged when the readings within 0.5 mm of the peak scatter about the
      smoothed curve by more than ``stick_slip_fraction`` of the peak (95th percentile of the
      deviation), or when the raw maximum lies more than 0.5 mm from the smoothed one.
    """
    rows = _shear_rows(reduced)
    x = rows["x_mm"].to_numpy()
    flags = []
    rate = rows["dydx"].to_numpy()
    if np.isfinite(rate).any() and np.nanmax(rate) > settings.critical_state_rate_tolerance:
        x_dil = float(x[int(np.nanargmax(rate))])
        limit = max(settings.peak_dilation_offset_mm, 0.25 * peak.x_mm)
        if abs(x_dil - peak.x_mm) > limit:
            flags.append(f"peak at {peak.x_mm:.2f} mm but maximum rate of dilation at {x_dil:.2f} mm "
                         f"(apart by more than {limit:.2f} mm): they should coincide; check the pick")
    near = np.abs(x - peak.x_mm) <= 0.5
    dev = np.abs(rows["tau_kpa"].to_numpy()[near] - rows["tau_smooth_kpa"].to_numpy()[near])
    if dev.size and float(np.percentile(dev, 95)) > settings.stick_slip_fraction * peak.tau_kpa:
        flags.append(f"stick-slip or noise near the peak: readings scatter by {float(np.percentile(dev, 95)):.1f} kPa "
                     f"({float(np.percentile(dev, 95)) / peak.tau_kpa * 100:.1f} % of the peak) "
                     "about the smoothed curve; the peak value is uncertain by about that much")
    x_raw_max = float(x[int(np.argmax(rows["tau_kpa"].to_numpy()))])
    if abs(x_raw_max - peak.x_mm) > 0.5:
        flags.append(f"the largest single reading is at {x_raw_max:.2f} mm, "
                     f"{abs(x_raw_max - peak.x_mm):.2f} mm from the "
                     f"peak of the smoothed curve at {peak.x_mm:.2f} mm: noise or stick-slip may move the peak")
    return tuple(flags)
