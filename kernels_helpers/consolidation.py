"""The consolidation stage and the shearing-rate check (REFERENCES sec. 1 and 2).

Pure functions. Settlement ``d`` (mm, positive in compression) against time ``t`` (s), both from
the first reading of the consolidation file.

* **Casagrande, log time**: ``d_0`` from two early times ``t1`` and ``4 t1`` on the parabolic
  start, ``d_0 = 2 d(t1) - d(4 t1)``, with ``t1`` where 10 % of the observed settlement has taken
  place (at least the first reading); ``d_100`` where the tangent at the steepest point of the
  curve on log time meets the straight line through the secondary branch (readings in the last
  35 % of the log-time span after the steepest point; that span must be at least one decade);
  ``d_50`` midway, ``t_50`` where the readings reach it. ``c_v = 0.197 H_dr^2 / t_50``.
* **Taylor, root time**: a straight line through the early readings (settlement after the first
  reading up to 40 % of the observed total) against sqrt(t); a second line from the same zero
  with abscissae 1.15 times larger; the first crossing with the readings gives sqrt(t_90).
  ``c_v = 0.848 H_dr^2 / t_90``; ``d_100 = d_0 + (d_90 - d_0)/0.9`` and ``t_100`` where the first
  line reaches ``d_100`` (T = pi/4).
* ``H_dr = H/2`` (drainage at both faces of the box), ``H`` the specimen height at that time.
* Time to failure: ``t_f = 50 t_50``, ``11.6 t_90`` or ``12.7 t_100``; by default the largest
  available governs (the cautious choice), or the one rule the engineer names
  (``RateSettings.time_to_failure``); the rule used is named. Actual rate: least-squares slope of horizontal
  displacement against time during shear; the stage is "too fast for drained conditions" when
  the failure pick was reached in less than the required ``t_f``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.signal import savgol_filter

from .settings import TIME_TO_FAILURE_RULES

__all__ = ["T50", "T90", "CasagrandeFit", "ConsolidationResult", "RateCheck", "TaylorFit", "analyse_consolidation",
           "casagrande", "consolidation_dict", "rate_check", "taylor", "terzaghi_u"]

T50, T90 = 0.197, 0.848  # time factors (REFERENCES sec. 2, published)
SECONDS_PER_YEAR = 365.25 * 86400.0
MM2_S_TO_M2_YR = 1e-6 * SECONDS_PER_YEAR


def terzaghi_u(time_factor: np.ndarray | float, terms: int = 200) -> np.ndarray:
    """Average degree of consolidation U(T) from Terzaghi's exact series, sum of 2/M^2 exp(-M^2 T)."""
    t = np.atleast_1d(np.asarray(time_factor, dtype=float))
    m = np.pi * (2 * np.arange(terms) + 1) / 2.0
    u = 1.0 - np.sum(2.0 / m[:, None] ** 2 * np.exp(-np.outer(m**2, t)), axis=0)
    return np.where(t > 0, u, 0.0)


@dataclass(frozen=True)
class CasagrandeFit:
    """Log-time construction; lines are ``d = a + b log10(t)`` (mm, t in s)."""

    t1_s: float
    d0_mm: float
    d50_mm: float
    d100_mm: float
    t50_s: float
    t100_s: float
    tangent: tuple[float, float]  # (a, b) of the tangent at the steepest point
    secondary: tuple[float, float]  # (a, b) of the secondary branch
    cv_mm2_s: float


@dataclass(frozen=True)
class TaylorFit:
    """Root-time construction; the first line is ``d = d0 + k sqrt(t)`` (mm, t in s)."""

    d0_mm: float
    k_mm_per_sqrt_s: float
    fit_from_s: float
    fit_to_s: float
    t90_s: float
    d90_mm: float
    d100_mm: float
    t100_s: float
    cv_mm2_s: float


@dataclass(frozen=True)
class ConsolidationResult:
    """Both constructions on one consolidation stage, with what could not be done in words."""

    time_s: np.ndarray = field(repr=False)
    settlement_mm: np.ndarray = field(repr=False)
    height0_mm: float
    casagrande: CasagrandeFit | None
    taylor: TaylorFit | None
    flags: tuple[str, ...]

    @property
    def final_settlement_mm(self) -> float:
        return float(self.settlement_mm[-1])


@dataclass(frozen=True)
class RateCheck:
    """Required time to failure against the actual test."""

    rule: str  # the governing rule, in words
    required_s: float
    candidates_s: dict[str, float]
    rate_mm_min: float  # actual, least squares during shear
    time_to_failure_s: float
    x_failure_mm: float
    max_rate_mm_min: float  # x_failure / required time
    too_fast: bool
    flag: str | None


def _interp_time(t: np.ndarray, d: np.ndarray, level: float) -> float:
    """First time the readings reach ``level`` (linear in sqrt t between readings); nan if never."""
    above = np.flatnonzero(d >= level)
    if not above.size:
        return float("nan")
    i = int(above[0])
    if i == 0:
        return float(t[0])
    r0, r1 = np.sqrt(t[i - 1]), np.sqrt(t[i])
    f = (level - d[i - 1]) / (d[i] - d[i - 1])
    return float((r0 + f * (r1 - r0)) ** 2)


def _d_at(t: np.ndarray, d: np.ndarray, when: float) -> float:
    return float(np.interp(np.sqrt(when), np.sqrt(t), d))


def _cv(time_factor: float, height0_mm: float, d_mm: float, t_s: float) -> float:
    h_dr = (height0_mm - d_mm) / 2.0
    return time_factor * h_dr**2 / t_s


def _after_zero(t_s: np.ndarray, d_mm: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """The readings after time zero and the settlement observed over them (mm)."""
    ok = t_s > 0
    t, d = t_s[ok], d_mm[ok]
    return t, d, float(d[-1] - d[0]) if d.size else 0.0


def casagrande(t_s: np.ndarray, d_mm: np.ndarray, height0_mm: float) -> tuple[CasagrandeFit | None, str | None]:
    """Casagrande's log-time construction (see the module docstring); (None, reason) when not possible."""
    t, d, total = _after_zero(t_s, d_mm)
    if t.size < 8 or total <= 0:
        return None, "Casagrande log-time: too few readings or no settlement"
    t1 = max(float(t[0]), _interp_time(t, d, d[0] + 0.1 * total))
    if not 4 * t1 <= t[-1]:
        return None, "Casagrande log-time: the readings end before 4 t1"
    d0 = 2 * _d_at(t, d, t1) - _d_at(t, d, 4 * t1)
    logt = np.log10(t)
    grid = np.linspace(logt[0], logt[-1], 201)
    dg = np.interp(grid, logt, d)
    step = grid[1] - grid[0]
    slope = savgol_filter(dg, 11, 2, deriv=1, delta=step, mode="interp")
    i = int(np.argmax(slope))
    smooth = savgol_filter(dg, 11, 2, mode="interp")
    b_t = float(slope[i])
    a_t = float(smooth[i] - b_t * grid[i])
    if logt[-1] - grid[i] < 1.0:
        return None, (f"Casagrande log-time: the readings end {logt[-1] - grid[i]:.2f} decade(s) after the steepest "
                      "point "
                      "(needs 1): no secondary branch to find d_100; record the consolidation for longer")
    sec = logt >= grid[i] + 0.65 * (logt[-1] - grid[i])
    if np.count_nonzero(sec) < 3:
        return None, "Casagrande log-time: fewer than 3 readings on the secondary branch"
    b_s, a_s = np.polyfit(logt[sec], d[sec], 1)
    if not b_t > b_s:
        return None, "Casagrande log-time: the tangent and the secondary branch do not meet"
    log100 = (a_s - a_t) / (b_t - b_s)
    d100 = float(a_s + b_s * log100)
    d50 = (d0 + d100) / 2.0
    t50 = _interp_time(t, d, d50)
    if not np.isfinite(t50) or d100 <= d0:
        return None, "Casagrande log-time: the readings never reach d_50"
    cv = _cv(T50, height0_mm, d50, t50)
    return CasagrandeFit(t1, d0, d50, d100, t50, float(10**log100), (a_t, b_t), (float(a_s), float(b_s)), cv), None


def taylor(t_s: np.ndarray, d_mm: np.ndarray, height0_mm: float) -> tuple[TaylorFit | None, str | None]:
    """Taylor's root-time construction (see the module docstring); (None, reason) when not possible."""
    t, d, total = _after_zero(t_s, d_mm)
    if t.size < 8 or total <= 0:
        return None, "Taylor root-time: too few readings or no settlement"
    early = d - d[0] <= 0.4 * total
    n_early = int(np.argmin(early)) if not early.all() else early.size  # the leading run only
    if n_early < 3:
        return None, ("Taylor root-time: fewer than 3 readings before 40 % of the settlement; take readings more often "
                      "at the start of consolidation")
    r = np.sqrt(t)
    k, d0 = np.polyfit(r[:n_early], d[:n_early], 1)
    if not k > 0:
        return None, "Taylor root-time: the early readings do not rise with root time"
    gap = d - (d0 + k / 1.15 * r)
    below = np.flatnonzero((gap[1:] <= 0) & (gap[:-1] > 0)) + 1
    below = below[below >= n_early - 1]
    if not below.size:
        return None, "Taylor root-time: the readings never cross the 1.15 line (consolidation not complete?)"
    j = int(below[0])
    f = gap[j - 1] / (gap[j - 1] - gap[j])
    r90 = float(r[j - 1] + f * (r[j] - r[j - 1]))
    d90 = float(d0 + k / 1.15 * r90)
    d100 = float(d0 + (d90 - d0) / 0.9)
    t90 = r90**2
    cv = _cv(T90, height0_mm, d90, t90)
    return TaylorFit(float(d0), float(k), float(t[0]), float(t[n_early - 1]), t90, d90, d100,
                     float(((d100 - d0) / k) ** 2), cv), None


def analyse_consolidation(time_s: np.ndarray, settlement_mm: np.ndarray, height0_mm: float,
                          declared_settlement_mm: float | None = None) -> ConsolidationResult:
    """Both constructions, and a flag when the declared consolidation settlement disagrees with the readings."""
    t = np.asarray(time_s, dtype=float) - float(time_s[0])
    d = np.asarray(settlement_mm, dtype=float) - float(settlement_mm[0])
    flags = []
    cas, why_c = casagrande(t, d, height0_mm)
    tay, why_t = taylor(t, d, height0_mm)
    flags += [w for w in (why_c, why_t) if w]
    if cas and tay and not 0.5 <= cas.cv_mm2_s / tay.cv_mm2_s <= 2.0:
        flags.append(f"c_v by log time ({cas.cv_mm2_s * MM2_S_TO_M2_YR:.3g} m2/yr) and root time "
                     f"({tay.cv_mm2_s * MM2_S_TO_M2_YR:.3g} m2/yr) differ by more than a factor of 2: "
                     "look at both plots")
    if declared_settlement_mm is not None:
        final = float(d[-1])
        if abs(final - declared_settlement_mm) > 0.01 + 0.05 * abs(final):
            flags.append(f"consolidation_settlement_mm {declared_settlement_mm:g} mm in the project file differs from "
                         f"the last consolidation reading, {final:.3f} mm: the void ratio uses the project "
                         "file's value")
    return ConsolidationResult(t, d, height0_mm, cas, tay, tuple(flags))


def rate_check(time_s: np.ndarray, x_mm: np.ndarray, start: int, failure: int,
               result: ConsolidationResult, rule: str = "largest") -> RateCheck | None:
    """The drained-rate check of one stage; None when the construction(s) the rule needs gave no time.

    ``start`` and ``failure`` are rows of the shear readings: the start of shear and the failure
    pick (the peak; the start of the critical-state window when there is no distinct peak).
    ``rule``: "largest" of the rules available, or one of :data:`TIME_TO_FAILURE_RULES`.
    """
    times = {"t_50": (result.casagrande.t50_s, "log time") if result.casagrande else None,
             "t_90": (result.taylor.t90_s, "root time") if result.taylor else None,
             "t_100": (result.taylor.t100_s, "root time") if result.taylor else None}
    cand: dict[str, float] = {}
    named: dict[str, str] = {}
    for name, (factor, which) in TIME_TO_FAILURE_RULES.items():
        found = times[which]
        if found is not None:
            text = f"t_f = {name} ({which} {found[0] / 60:.3g} min, {found[1]})"
            cand[text], named[name] = factor * found[0], text
    if not cand or (rule != "largest" and rule not in named):
        return None
    rule = max(cand, key=cand.__getitem__) if rule == "largest" else named[rule]  # every candidate stays reported
    required = cand[rule]
    t, x = np.asarray(time_s, dtype=float), np.asarray(x_mm, dtype=float)
    seg = slice(start, max(failure, start + 2) + 1)
    rate = float(np.polyfit(t[seg], x[seg], 1)[0]) * 60.0 if t[seg].size >= 2 else float("nan")
    took = float(t[failure] - t[start])
    x_f = float(x[failure])
    max_rate = x_f / required * 60.0
    too_fast = took < required
    flag = None
    if too_fast:
        flag = (f"too fast for drained conditions: failure reached after {took / 60:.1f} min at {x_f:.2f} mm "
                f"(sheared at {rate:.3g} mm/min); the consolidation stage needs {required / 60:.1f} min by {rule}, "
                f"i.e. at most {max_rate:.3g} mm/min to that displacement")
    return RateCheck(rule, required, cand, rate, took, x_f, max_rate, too_fast, flag)


def consolidation_dict(result: ConsolidationResult | None) -> dict[str, object] | None:
    """JSON form of a consolidation analysis: the constructions' numbers, not the readings."""
    if result is None:
        return None
    out: dict[str, object] = {"height0_mm": result.height0_mm, "n_readings": int(result.time_s.size),
                              "final_settlement_mm": result.final_settlement_mm, "flags": list(result.flags)}
    for name, fit in (("casagrande", result.casagrande), ("taylor", result.taylor)):
        d = None if fit is None else {k: (list(v) if isinstance(v, tuple) else v) for k, v in fit.__dict__.items()}
        if d is not None:
            d["cv_m2_yr"] = fit.cv_mm2_s * MM2_S_TO_M2_YR  # type: ignore[union-attr]
        out[name] = d
    return out
