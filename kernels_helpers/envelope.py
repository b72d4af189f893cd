"""Mohr-Coulomb envelopes fitted by least squares, with their statistics.

``tau = c' + sigma' tan(phi')``. Two fits are always available: c' free (ordinary least squares
with intercept, n - 2 degrees of freedom) and through the origin (c' = 0, n - 1 degrees of
freedom, R^2 on the uncorrected total sum of squares, so not comparable with the R^2 of the fit
with intercept). Confidence intervals use Student's t at the stated level.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats

__all__ = ["LineFit", "fit_line", "fit_through_origin"]


@dataclass(frozen=True)
class LineFit:
    """A straight-line fit tau = intercept + slope * sigma (kPa).

    ``intercept`` is c' (kPa; exactly 0 for a through-origin fit), ``phi_deg`` is atan(slope).
    Intervals are two-sided at ``level`` (Student t with ``dof`` degrees of freedom); the phi'
    interval is the image of the slope interval. ``r2_definition`` says which R^2 this is.
    """

    n: int
    dof: int
    slope: float
    slope_se: float
    intercept: float
    intercept_se: float
    residual_sd: float
    r2: float
    r2_definition: str
    through_origin: bool
    level: float
    t_value: float
    residuals: tuple[float, ...]

    @property
    def phi_deg(self) -> float:
        return math.degrees(math.atan(self.slope))

    @property
    def phi_interval_deg(self) -> tuple[float, float]:
        half = self.t_value * self.slope_se
        return (math.degrees(math.atan(self.slope - half)), math.degrees(math.atan(self.slope + half)))

    @property
    def c_interval_kpa(self) -> tuple[float, float]:
        half = self.t_value * self.intercept_se
        return (self.intercept - half, self.intercept + half)

    @property
    def negative_cohesion(self) -> bool:
        return not self.through_origin and self.intercept < 0


def _as_arrays(sigma: Sequence[float], tau: Sequence[float], need: int) -> tuple[np.ndarray, np.ndarray]:
    x = np.asarray(sigma, dtype=float)
    y = np.asarray(tau, dtype=float)
    if x.shape != y.shape or x.ndim != 1:
        raise ValueError("sigma and tau must be 1-D sequences of the same length")
    if len(x) < need:
        raise ValueError(f"this fit needs at least {need} points, got {len(x)}")
    return x, y


def fit_line(sigma: Sequence[float], tau: Sequence[float], level: float = 0.95) -> LineFit:
    """Least-squares line with intercept (c' free). Needs 3 points for statistics (n - 2 >= 1)."""
    x, y = _as_arrays(sigma, tau, 3)
    n = len(x)
    if np.ptp(x) == 0:
        raise ValueError("all points have the same normal stress: no envelope can be fitted")
    xm, ym = x.mean(), y.mean()
    sxx = float(np.sum((x - xm) ** 2))
    slope = float(np.sum((x - xm) * (y - ym)) / sxx)
    intercept = float(ym - slope * xm)
    res = y - (intercept + slope * x)
    dof = n - 2
    s = math.sqrt(float(np.sum(res**2)) / dof)
    syy = float(np.sum((y - ym) ** 2))
    return LineFit(
        n=n,
        dof=dof,
        slope=slope,
        slope_se=s / math.sqrt(sxx),
        intercept=intercept,
        intercept_se=s * math.sqrt(1.0 / n + xm**2 / sxx),
        residual_sd=s,
        r2=1.0 - float(np.sum(res**2)) / syy if syy > 0 else 1.0,
        r2_definition="1 - SSE/SST, SST about the mean",
        through_origin=False,
        level=level,
        t_value=float(stats.t.ppf(0.5 + level / 2, dof)),
        residuals=tuple(float(r) for r in res),
    )


def fit_through_origin(sigma: Sequence[float], tau: Sequence[float], level: float = 0.95) -> LineFit:
    """Least-squares line through the origin (c' = 0). Needs 2 points for statistics (n - 1 >= 1)."""
    x, y = _as_arrays(sigma, tau, 2)
    n = len(x)
    sxx = float(np.sum(x**2))
    if sxx == 0:
        raise ValueError("all points have zero normal stress: no envelope through the origin can be fitted")
    slope = float(np.sum(x * y) / sxx)
    res = y - slope * x
    dof = n - 1
    sse = float(np.sum(res**2))
    s = math.sqrt(sse / dof)
    return LineFit(
        n=n,
        dof=dof,
        slope=slope,
        slope_se=s / math.sqrt(sxx),
        intercept=0.0,
        intercept_se=0.0,
        residual_sd=s,
        r2=1.0 - sse / float(np.sum(y**2)),
        r2_definition="1 - SSE/sum(tau^2), uncorrected (through the origin)",
        through_origin=True,
        level=level,
        t_value=float(stats.t.ppf(0.5 + level / 2, dof)),
        residuals=tuple(float(r) for r in res),
    )
