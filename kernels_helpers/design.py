"""Characteristic and design values of c' and phi' from an envelope, with the method stated.

An interpretation aid, not a design: the characteristic value is a cautious estimate of the value
affecting the limit state (EN 1997-1 2.4.5.2), chosen by the engineer; this module only does the
arithmetic of the methods named below and says which one was used.

* **Regression bound** (the default): the lower one-sided bound at ``level`` of the fitted line
  over the engineer's design normal-stress range, of the mean line when a large zone of ground
  governs (the mean matters) or of the prediction for one new specimen when failure is local (a
  fractile matters): tau_k(sigma) = c' + sigma tan phi' - t_{dof,level} s_e(sigma). The bound is
  concave, so it is then expressed either as the straight line through the bound at both ends of
  the range ("tangent" form: c'_k and phi'_k; on or below the bound inside the range) or as the
  line through the origin under the bound everywhere in the range ("secant" form: c'_k = 0).
* **EN 1990 Annex D** on the per-stage secant tan phi': X_k = m (1 - k_n V), V = s/m with s the
  sample standard deviation; k_n for the 5 % fractile (local) or for the mean at 95 % confidence
  (large zone), V unknown (from the sample) or known (given by the engineer).
  Schneider's X_k = m (1 - 0.5 V) is shown beside it for comparison.
* **Design values**: tan phi'_d = tan phi'_k / gamma_phi', c'_d = c'_k / gamma_c'. Defaults: the
  recommended sets M1 and M2 of EN 1997-1 Annex A Table A.4; National Annexes and local codes
  govern and may differ.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Final, Literal

import numpy as np
from scipy import stats

from .envelope import LineFit, confidence_band, prediction_band
from .settings import PARTIAL_FACTOR_SETS

__all__ = [
    "DESIGN_CAUTION",
    "PARTIAL_FACTOR_SETS",
    "TABLE_D1",
    "DesignValues",
    "RegressionCharacteristic",
    "TanPhiStatistics",
    "design_values",
    "kn_fractile",
    "kn_fractile_formula",
    "kn_mean",
    "regression_characteristic",
    "tan_phi_statistics",
]

LimitState = Literal["large zone", "local"]
Expressed = Literal["tangent", "secant"]


# EN 1990 Annex D, Table D1: k_n for the 5 % characteristic value; n -> k_n (n = 0: n infinite)
TABLE_D1: Final = {
    "V known": {3: 1.89, 4: 1.83, 5: 1.80, 6: 1.77, 8: 1.74, 10: 1.72, 20: 1.68, 30: 1.67, 0: 1.64},
    "V unknown": {3: 3.37, 4: 2.63, 5: 2.33, 6: 2.18, 8: 2.00, 10: 1.92, 20: 1.76, 30: 1.73, 0: 1.64},
}

DESIGN_CAUTION: Final = (
    "Characteristic and design values here are arithmetic on a few laboratory specimens under the "
    "method stated. Whether they suit a design depends on the limit state, the site variability, the "
    "quality and representativeness of the samples and the governing code: the partial factors shown "
    "are the recommended values of EN 1997-1 Annex A, which a National Annex or local code may change. "
    "The choice and the values need the review and signature of a licensed geotechnical engineer."
)


def kn_fractile_formula(n: int, v_known: bool) -> float:
    """k_n of the 5 % fractile: u_0.95 sqrt(1 + 1/n) (V known) or t_{n-1,0.95} sqrt(1 + 1/n) (V unknown)."""
    if n < 2 or (n < 3 and not v_known):
        raise ValueError(f"k_n needs at least {2 if v_known else 3} values, got {n}")
    q = stats.norm.ppf(0.95) if v_known else stats.t.ppf(0.95, n - 1)
    return float(q * math.sqrt(1.0 + 1.0 / n))


def kn_fractile(n: int, v_known: bool) -> tuple[float, str]:
    """k_n of the 5 % fractile: EN 1990 Table D1 where n is tabulated, else the formula; with its source."""
    table = TABLE_D1["V known" if v_known else "V unknown"]
    if n in table:
        return table[n], f"EN 1990 Table D1, n = {n}, {'V known' if v_known else 'V unknown'}"
    which = "u_0.95" if v_known else f"t_{{{n - 1},0.95}}"
    return kn_fractile_formula(n, v_known), f"{which} sqrt(1 + 1/n), n = {n} (not tabulated in EN 1990 Table D1)"


def kn_mean(n: int, v_known: bool) -> float:
    """k_n of the mean at 95 % confidence: t_{n-1,0.95}/sqrt(n) (V unknown) or u_0.95/sqrt(n) (V known)."""
    if n < 2:
        raise ValueError(f"k_n needs at least 2 values, got {n}")
    q = stats.norm.ppf(0.95) if v_known else stats.t.ppf(0.95, n - 1)
    return float(q / math.sqrt(n))


@dataclass(frozen=True)
class TanPhiStatistics:
    """EN 1990 Annex D statistics on tan phi' values (one per stage), and Schneider's estimate."""

    n: int
    values: tuple[float, ...]
    mean: float
    sd: float  # sample standard deviation (n - 1)
    v_sample: float
    v_used: float
    v_known: bool
    target: str  # "5 % fractile" or "mean at 95 % confidence"
    kn: float
    kn_source: str
    tan_phi_k: float
    schneider: float  # m (1 - 0.5 V), V from the sample

    @property
    def phi_k_deg(self) -> float:
        return math.degrees(math.atan(self.tan_phi_k))

    @property
    def phi_schneider_deg(self) -> float:
        return math.degrees(math.atan(self.schneider))

    @property
    def phi_mean_deg(self) -> float:
        return math.degrees(math.atan(self.mean))


def tan_phi_statistics(tan_phi: Sequence[float], limit_state: LimitState,
                       v_known: float | None = None) -> TanPhiStatistics:
    """X_k = m (1 - k_n V) on tan phi' (EN 1990 Annex D), Schneider's m (1 - 0.5 V) beside it.

    ``limit_state`` "local" gives the 5 % fractile, "large zone" the mean at 95 % confidence.
    ``v_known`` is a coefficient of variation known from experience (EN 1990 D7.2); None takes V
    from the sample. The statistics are on tan phi', not on phi'.
    """
    x = np.asarray(tan_phi, dtype=float)
    n = len(x)
    if n < 3:
        raise ValueError(f"statistics on tan phi' need at least 3 values, got {n}")
    m, s = float(x.mean()), float(x.std(ddof=1))
    known = v_known is not None
    v = float(v_known) if v_known is not None else s / m
    if limit_state == "local":
        kn, source, target = *kn_fractile(n, known), "5 % fractile"
    else:
        kn = kn_mean(n, known)
        source = f"{'u_0.95' if known else f't_{{{n - 1},0.95}}'}/sqrt(n), n = {n}"
        target = "mean at 95 % confidence"
    return TanPhiStatistics(
        n=n, values=tuple(float(v_) for v_ in x), mean=m, sd=s, v_sample=s / m, v_used=v, v_known=known,
        target=target, kn=kn, kn_source=source, tan_phi_k=m * (1.0 - kn * v), schneider=m * (1.0 - 0.5 * s / m),
    )


@dataclass(frozen=True)
class RegressionCharacteristic:
    """c'_k and phi'_k from the lower bound of a fitted line over a normal-stress range (kPa)."""

    bound: str  # "mean" or "prediction"
    level: float
    stress_range_kpa: tuple[float, float]
    sigma_kpa: tuple[float, ...]  # grid over the range
    tau_bound_kpa: tuple[float, ...]  # the lower bound on that grid
    expressed: str  # "tangent" (c'_k, phi'_k through the bound at both ends) or "secant" (c'_k = 0)
    c_k_kpa: float
    tan_phi_k: float
    method: str
    flags: tuple[str, ...] = ()

    @property
    def phi_k_deg(self) -> float:
        return math.degrees(math.atan(self.tan_phi_k))


def regression_characteristic(fit: LineFit, stress_range_kpa: tuple[float, float], limit_state: LimitState,
                              expressed: Expressed, level: float = 0.95, tested_kpa: tuple[float, float] | None = None,
                              n_grid: int = 41) -> RegressionCharacteristic:
    """Lower one-sided bound of ``fit`` over the range, as a tangent (c'_k, phi'_k) or secant (c'_k = 0) line."""
    lo, hi = (float(v) for v in stress_range_kpa)
    if not 0 < lo < hi:
        raise ValueError(f"the design normal-stress range must satisfy 0 < low < high, not {stress_range_kpa!r} kPa")
    grid = np.linspace(lo, hi, n_grid)
    bound = "mean" if limit_state == "large zone" else "prediction"
    band = confidence_band if bound == "mean" else prediction_band
    tau_k = band(fit, grid, level, one_sided=True)[0]
    of = "mean line" if bound == "mean" else "prediction for one new specimen"
    what = (f"lower one-sided {level * 100:g} % bound of the {of} of the "
            f"{'through-origin' if fit.through_origin else 'c-free'} fit (Student t, {fit.dof} dof)")
    flags: list[str] = []
    if expressed == "secant":
        ratios = tau_k / grid
        i = int(np.argmin(ratios))
        tan_k, c_k = float(ratios[i]), 0.0
        form = (f"secant form: line through the origin on or below the bound over {lo:g}-{hi:g} kPa "
                f"(it touches the bound at {grid[i]:.0f} kPa); c'_k = 0")
    else:
        tan_k = float((tau_k[-1] - tau_k[0]) / (hi - lo))
        c_k = float(tau_k[0] - tan_k * lo)
        form = (f"tangent form: straight line through the bound at {lo:g} and {hi:g} kPa; the bound is concave, "
                "so the line lies on or below it inside the range")
        if c_k < 0:
            flags.append(f"c'_k = {c_k:.2f} kPa is negative: consider c'_k = 0 (secant form)")
    if tan_k <= 0:
        flags.append(f"the bound gives tan phi'_k = {tan_k:.3f} <= 0: too few or too scattered points for this method")
    if tested_kpa is not None and (lo < tested_kpa[0] * 0.999 or hi > tested_kpa[1] * 1.001):
        flags.append(f"the design range {lo:g}-{hi:g} kPa extends beyond the tested normal stresses "
                     f"{tested_kpa[0]:.0f}-{tested_kpa[1]:.0f} kPa: the bound is extrapolated there")
    return RegressionCharacteristic(
        bound=bound, level=level, stress_range_kpa=(lo, hi), sigma_kpa=tuple(float(v) for v in grid),
        tau_bound_kpa=tuple(float(v) for v in tau_k), expressed=expressed, c_k_kpa=c_k, tan_phi_k=tan_k,
        method=f"{what}; {form}", flags=tuple(flags),
    )


@dataclass(frozen=True)
class DesignValues:
    """Design values from characteristic ones with one set of partial factors."""

    set_name: str
    gamma_phi: float  # on tan phi'
    gamma_c: float
    c_k_kpa: float
    tan_phi_k: float

    @property
    def c_d_kpa(self) -> float:
        return self.c_k_kpa / self.gamma_c

    @property
    def tan_phi_d(self) -> float:
        return self.tan_phi_k / self.gamma_phi

    @property
    def phi_d_deg(self) -> float:
        return math.degrees(math.atan(self.tan_phi_d))


def design_values(c_k_kpa: float, tan_phi_k: float, set_name: str, gamma_phi: float, gamma_c: float) -> DesignValues:
    """tan phi'_d = tan phi'_k / gamma_phi', c'_d = c'_k / gamma_c'."""
    if not (gamma_phi > 0 and gamma_c > 0):
        raise ValueError(f"partial factors must be positive, not gamma_phi' {gamma_phi!r}, gamma_c' {gamma_c!r}")
    return DesignValues(set_name, float(gamma_phi), float(gamma_c), float(c_k_kpa), float(tan_phi_k))
