"""Mohr-Coulomb envelopes fitted by least squares, with their statistics.

``tau = c' + sigma' tan(phi')``. Two fits are always available: c' free (ordinary least squares
with intercept, n - 2 degrees of freedom) and through the origin (c' = 0, n - 1 degrees of
freedom, R^2 on the uncorrected total sum of squares, so not comparable with the R^2 of the fit
with intercept). Confidence intervals use Student's t at the stated level.

Also here: the confidence band of the mean line and the prediction band for one new specimen
(either fit), the curved envelope tau = a sigma^b fitted by nonlinear least squares on tau, a
side-by-side of straight-line and curved residuals, and the secant angle of each point.
"""

from __future__ import annotations

import functools
import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

__all__ = [
    "CurvatureComparison",
    "LineFit",
    "PowerLawFit",
    "compare_linear_curved",
    "confidence_band",
    "fit_line",
    "fit_power_law",
    "fit_through_origin",
    "mean_se",
    "prediction_band",
    "secant_phi_deg",
    "t_quantile",
]


@functools.lru_cache(maxsize=512)
def t_quantile(p: float, dof: int) -> float:
    """Student's t quantile (scipy.stats.t.ppf), remembered: a live refit asks for the same few many times."""
    return float(stats.t.ppf(p, dof))


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
    cov_intercept_slope: float = 0.0  # kPa; 0 for a through-origin fit (the intercept is fixed)

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
        t_value=t_quantile(0.5 + level / 2, dof),
        residuals=tuple(float(r) for r in res),
        cov_intercept_slope=float(-xm * s**2 / sxx),
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
        t_value=t_quantile(0.5 + level / 2, dof),
        residuals=tuple(float(r) for r in res),
    )


# --- bands of a straight-line fit -----------------------------------------------------------------


def _t_factor(dof: int, level: float, one_sided: bool) -> float:
    """Student t quantile: two-sided at ``level``, or the one-sided lower/upper bound at ``level``."""
    return t_quantile(level if one_sided else 0.5 + level / 2, dof)


def mean_se(fit: LineFit, sigma: Sequence[float] | np.ndarray) -> np.ndarray:
    """Standard error of the fitted mean line at each normal stress (kPa).

    Var(c' + b sigma) = Var(c') + sigma^2 Var(b) + 2 sigma Cov(c', b); through the origin only the
    slope term remains.
    """
    x = np.asarray(sigma, dtype=float)
    var = fit.intercept_se**2 + x**2 * fit.slope_se**2 + 2.0 * x * fit.cov_intercept_slope
    return np.sqrt(np.maximum(var, 0.0))


def confidence_band(fit: LineFit, sigma: Sequence[float] | np.ndarray, level: float = 0.95,
                    one_sided: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper confidence limits of the mean line at each ``sigma`` (kPa).

    Two-sided at ``level`` by default; with ``one_sided`` each limit is a one-sided bound at
    ``level`` (a one-sided 95 % lower bound is the lower limit of the two-sided 90 % band).
    """
    x = np.asarray(sigma, dtype=float)
    centre = fit.intercept + fit.slope * x
    half = _t_factor(fit.dof, level, one_sided) * mean_se(fit, x)
    return centre - half, centre + half


def prediction_band(fit: LineFit, sigma: Sequence[float] | np.ndarray, level: float = 0.95,
                    one_sided: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper prediction limits for one new specimen at each ``sigma`` (kPa).

    As :func:`confidence_band` with the residual variance added: s^2 (1 + 1/n + ...) for c' free.
    """
    x = np.asarray(sigma, dtype=float)
    centre = fit.intercept + fit.slope * x
    se = np.sqrt(mean_se(fit, x) ** 2 + fit.residual_sd**2)
    half = _t_factor(fit.dof, level, one_sided) * se
    return centre - half, centre + half


# --- curved envelope: tau = a sigma^b -----------------------------------------------------------


@dataclass(frozen=True)
class PowerLawFit:
    """Curved envelope tau = a sigma^b (kPa), fitted by nonlinear least squares on tau.

    ``a`` is in kPa^(1-b); secant angle atan(tau/sigma), tangent angle atan(b tau/sigma). The
    residual s.d. uses n - 2 degrees of freedom, so it compares directly with the c'-free line.
    """

    n: int
    a: float
    a_se: float
    b: float
    b_se: float
    residual_sd: float
    sse: float
    residuals: tuple[float, ...]

    def tau_kpa(self, sigma: Sequence[float] | np.ndarray | float) -> np.ndarray:
        return self.a * np.asarray(sigma, dtype=float) ** self.b

    def phi_secant_deg(self, sigma: Sequence[float] | np.ndarray | float) -> np.ndarray:
        x = np.asarray(sigma, dtype=float)
        return np.degrees(np.arctan(self.a * x ** (self.b - 1.0)))

    def phi_tangent_deg(self, sigma: Sequence[float] | np.ndarray | float) -> np.ndarray:
        x = np.asarray(sigma, dtype=float)
        return np.degrees(np.arctan(self.b * self.a * x ** (self.b - 1.0)))


def fit_power_law(sigma: Sequence[float], tau: Sequence[float]) -> PowerLawFit:
    """Fit tau = a sigma^b by nonlinear least squares on tau (absolute, not relative, error).

    The starting point is the log-log straight line (which would minimise relative error); the
    result is the least-squares fit on tau itself (``scipy.optimize.curve_fit``). Needs 3 points
    with positive stresses.
    """
    x, y = _as_arrays(sigma, tau, 3)
    if np.any(x <= 0) or np.any(y <= 0):
        raise ValueError("a power-law envelope needs positive normal and shear stresses")
    if np.ptp(x) == 0:
        raise ValueError("all points have the same normal stress: no envelope can be fitted")
    b0, log_a0 = np.polyfit(np.log(x), np.log(y), 1)
    with warnings.catch_warnings():  # a covariance that cannot be estimated gives NaN standard errors instead
        warnings.simplefilter("ignore", optimize.OptimizeWarning)
        (a, b), cov = optimize.curve_fit(lambda s, a, b: a * s**b, x, y, p0=(math.exp(log_a0), b0), maxfev=10000)
    res = y - a * x**b
    sse = float(np.sum(res**2))
    n = len(x)
    se = np.sqrt(np.maximum(np.diag(cov), 0.0)) if np.all(np.isfinite(cov)) else np.array([math.nan, math.nan])
    return PowerLawFit(
        n=n, a=float(a), a_se=float(se[0]), b=float(b), b_se=float(se[1]),
        residual_sd=math.sqrt(sse / (n - 2)) if n > 2 else math.nan, sse=sse,
        residuals=tuple(float(r) for r in res),
    )


@dataclass(frozen=True)
class CurvatureComparison:
    """Residuals of the straight line (c' free) and the power law at each stage (kPa).

    Both fits have two parameters, so their sums of squares compare directly. A straight line
    through a curved envelope leaves residuals of one sign at both ends and the other in between.
    """

    sigma_kpa: tuple[float, ...]
    line_residuals: tuple[float, ...]
    power_residuals: tuple[float, ...]
    line_sse: float
    power_sse: float

    @property
    def statement(self) -> str:
        if self.line_sse == 0:
            return "the straight line fits the points exactly: no curvature can be seen"
        change = (self.power_sse - self.line_sse) / self.line_sse * 100.0
        ordered = sorted(zip(self.sigma_kpa, self.line_residuals, strict=True))
        pattern = "".join("+" if r > 0 else "-" for _, r in ordered)
        return (f"sum of squared residuals: straight line {self.line_sse:.3g} kPa^2, "
                f"power law {self.power_sse:.3g} kPa^2 "
                f"({change:+.0f} %); signs of the straight-line residuals in order of stress: {pattern}")


def compare_linear_curved(sigma: Sequence[float], line: LineFit, power: PowerLawFit) -> CurvatureComparison:
    """Put the residuals of a c'-free line and of a power law side by side (same points)."""
    return CurvatureComparison(
        sigma_kpa=tuple(float(v) for v in sigma),
        line_residuals=line.residuals,
        power_residuals=power.residuals,
        line_sse=float(sum(r * r for r in line.residuals)),
        power_sse=power.sse,
    )


def secant_phi_deg(sigma: Sequence[float], tau: Sequence[float]) -> tuple[float, ...]:
    """Secant friction angle atan(tau/sigma') of each point (deg)."""
    x, y = _as_arrays(sigma, tau, 1)
    return tuple(float(v) for v in np.degrees(np.arctan2(y, x)))
