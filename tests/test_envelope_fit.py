"""Mohr-Coulomb fits against certified data (NIST StRD) and the reference libraries."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from kernels_helpers.envelope import fit_line, fit_through_origin

# NIST StRD linear regression, dataset Norris (calibration of ozone monitors), 36 observations,
# https://www.itl.nist.gov/div898/strd/lls/data/Norris.shtml; (x, y) in the file's order.
NORRIS_X = [
    0.2, 337.4, 118.2, 884.6, 10.1, 226.5, 666.3, 996.3, 448.6, 777.0, 558.2, 0.4,
    0.6, 775.5, 666.9, 338.0, 447.5, 11.6, 556.0, 228.1, 995.8, 887.6, 120.2, 0.3,
    0.3, 556.8, 339.1, 887.2, 999.0, 779.0, 11.1, 118.3, 229.2, 669.1, 448.9, 0.5,
]  # fmt: skip
NORRIS_Y = [
    0.1, 338.8, 118.1, 888.0, 9.2, 228.1, 668.5, 998.5, 449.1, 778.9, 559.2, 0.3,
    0.1, 778.1, 668.8, 339.3, 448.9, 10.8, 557.7, 228.3, 998.0, 888.8, 119.6, 0.3,
    0.6, 557.6, 339.3, 888.0, 998.5, 778.9, 10.2, 117.6, 228.9, 668.4, 449.2, 0.2,
]  # fmt: skip

# Data sets for the comparisons with scipy and statsmodels (arbitrary test inputs, the reference
# being the libraries): REFERENCES sec. 7 check set, a negative intercept, a larger scatter,
# an exact line, and Norris.
DATASETS = {
    "references-sec7": ([50.0, 100.0, 200.0], [38.0, 66.0, 128.0]),
    "negative-c": ([25.0, 50.0, 100.0, 200.0, 400.0], [12.0, 31.0, 60.0, 118.0, 236.0]),
    "scatter": ([40.0, 80.0, 80.0, 160.0, 240.0, 320.0], [35.0, 52.0, 61.0, 101.0, 150.0, 188.0]),
    "exact": ([10.0, 20.0, 30.0], [15.0, 25.0, 35.0]),
    "nist-norris": (NORRIS_X, NORRIS_Y),
}


@pytest.mark.parametrize("name", sorted(DATASETS))
def test_fit_line_against_scipy_linregress(name: str) -> None:
    x, y = DATASETS[name]
    ref = stats.linregress(x, y)  # scipy.stats.linregress: REFERENCES sec. 8 reference library
    fit = fit_line(x, y)
    assert fit.slope == pytest.approx(ref.slope, rel=1e-10)
    assert fit.intercept == pytest.approx(ref.intercept, rel=1e-9, abs=1e-9)
    assert fit.slope_se == pytest.approx(ref.stderr, rel=1e-9, abs=1e-12)
    assert fit.intercept_se == pytest.approx(ref.intercept_stderr, rel=1e-9, abs=1e-12)
    assert fit.r2 == pytest.approx(ref.rvalue**2, rel=1e-10)
    assert (fit.n, fit.dof, fit.through_origin) == (len(x), len(x) - 2, False)


@pytest.mark.parametrize("name", sorted(DATASETS))
def test_fit_line_against_statsmodels_ols(name: str) -> None:
    x, y = DATASETS[name]
    ref = sm.OLS(np.asarray(y), sm.add_constant(np.asarray(x))).fit()  # statsmodels OLS, REFERENCES sec. 8
    fit = fit_line(x, y, level=0.95)
    assert [fit.intercept, fit.slope] == pytest.approx(list(ref.params), rel=1e-9, abs=1e-9)
    assert [fit.intercept_se, fit.slope_se] == pytest.approx(list(ref.bse), rel=1e-9, abs=1e-12)
    assert fit.residual_sd == pytest.approx(math.sqrt(ref.scale), rel=1e-9, abs=1e-12)
    assert list(fit.residuals) == pytest.approx(list(ref.resid), abs=1e-9)
    (c_lo, c_hi), (b_lo, b_hi) = ref.conf_int(alpha=0.05)
    assert fit.c_interval_kpa == pytest.approx((c_lo, c_hi), rel=1e-9, abs=1e-9)
    phi_lo, phi_hi = math.degrees(math.atan(b_lo)), math.degrees(math.atan(b_hi))
    assert fit.phi_interval_deg == pytest.approx((phi_lo, phi_hi), rel=1e-9)


def test_fit_line_references_sec7_check() -> None:
    # REFERENCES sec. 7 [C]: sigma {50, 100, 200}, tau {38, 66, 128}
    fit = fit_line([50.0, 100.0, 200.0], [38.0, 66.0, 128.0], level=0.90)
    assert fit.intercept == pytest.approx(7.000, abs=5e-4)
    assert fit.intercept_se == pytest.approx(1.96396, abs=5e-6)
    assert fit.slope == pytest.approx(0.602857, abs=5e-7)
    assert fit.slope_se == pytest.approx(0.014846, abs=5e-7)
    assert fit.residual_sd == pytest.approx(1.60357, abs=5e-6)
    assert fit.phi_deg == pytest.approx(31.084, abs=5e-4)
    # t_{1,0.95} = 6.31375: the one-sided 95 % point is the two-sided 90 % level
    assert fit.t_value == pytest.approx(6.31375, abs=5e-6)


def test_fit_line_nist_norris_certified() -> None:
    # NIST StRD Norris certified values (REFERENCES sec. 8)
    fit = fit_line(NORRIS_X, NORRIS_Y)
    assert fit.intercept == pytest.approx(-0.262323073774029, rel=1e-9)
    assert fit.intercept_se == pytest.approx(0.232818234301152, rel=1e-9)
    assert fit.slope == pytest.approx(1.00211681802045, rel=1e-11)
    assert fit.slope_se == pytest.approx(4.29796848199937e-4, rel=1e-9)
    assert fit.r2 == pytest.approx(0.999993745883712, rel=1e-12)
    assert fit.residual_sd == pytest.approx(0.884796396144373, rel=1e-9)  # NIST Norris residual SD, from memory


NOINT = {
    # NIST StRD NoInt1 certified values (REFERENCES sec. 8): B1, SE, residual SD, R2 (uncorrected)
    "NoInt1": (
        list(range(60, 71)),
        list(range(130, 141)),
        (2.07438016528926, 0.0165289256198347, 3.56753034006338, 0.999365492298663),
    ),
    # NIST StRD NoInt2 certified values (REFERENCES sec. 8)
    "NoInt2": (
        [4.0, 5.0, 6.0],
        [3.0, 4.0, 4.0],
        (0.727272727272727, 0.0420827318078432, 0.369274472937998, 0.993348115299335),
    ),
}


@pytest.mark.parametrize("name", sorted(NOINT))
def test_fit_through_origin_nist_certified(name: str) -> None:
    x, y, (b1, se, sd, r2) = NOINT[name]
    fit = fit_through_origin(x, y)
    assert fit.slope == pytest.approx(b1, rel=1e-12)
    assert fit.slope_se == pytest.approx(se, rel=1e-12)
    assert fit.residual_sd == pytest.approx(sd, rel=1e-12)
    assert fit.r2 == pytest.approx(r2, rel=1e-12)
    assert (fit.intercept, fit.intercept_se, fit.dof, fit.through_origin) == (0.0, 0.0, len(x) - 1, True)
    assert "uncorrected" in fit.r2_definition  # REFERENCES sec. 8: R2 on the uncorrected total


THROUGH_ORIGIN_SETS = {**{k: (v[0], v[1]) for k, v in NOINT.items()}, **DATASETS}


@pytest.mark.parametrize("name", sorted(THROUGH_ORIGIN_SETS))
def test_fit_through_origin_against_statsmodels(name: str) -> None:
    x, y = (np.asarray(v, dtype=float) for v in THROUGH_ORIGIN_SETS[name])
    ref = sm.OLS(y, x[:, None]).fit()  # statsmodels OLS without a constant: uncentred R2
    fit = fit_through_origin(x, y, level=0.95)
    assert fit.slope == pytest.approx(ref.params[0], rel=1e-10)
    assert fit.slope_se == pytest.approx(ref.bse[0], rel=1e-9)
    assert fit.residual_sd == pytest.approx(math.sqrt(ref.scale), rel=1e-9)
    assert fit.r2 == pytest.approx(ref.rsquared, rel=1e-10)
    lo, hi = ref.conf_int(alpha=0.05)[0]
    assert fit.phi_interval_deg == pytest.approx((math.degrees(math.atan(lo)), math.degrees(math.atan(hi))), rel=1e-9)


@pytest.mark.parametrize("level", [0.80, 0.90, 0.95, 0.99])
@pytest.mark.parametrize("name", ["references-sec7", "scatter", "nist-norris"])
def test_intervals_use_student_t(name: str, level: float) -> None:
    # REFERENCES sec. 8 [P]: n - 2 degrees of freedom with c' free, n - 1 through the origin;
    # reference quantile scipy.stats.t.ppf
    x, y = DATASETS[name]
    n = len(x)
    free = fit_line(x, y, level=level)
    t_free = stats.t.ppf(0.5 + level / 2.0, n - 2)
    assert free.t_value == pytest.approx(t_free, rel=1e-12)
    half_b, half_c = t_free * free.slope_se, t_free * free.intercept_se
    assert free.phi_interval_deg == pytest.approx(
        (math.degrees(math.atan(free.slope - half_b)), math.degrees(math.atan(free.slope + half_b))), rel=1e-12
    )
    c_lo, c_hi = free.intercept - half_c, free.intercept + half_c
    assert free.c_interval_kpa == pytest.approx((c_lo, c_hi), rel=1e-12, abs=1e-12)
    origin = fit_through_origin(x, y, level=level)
    assert origin.t_value == pytest.approx(stats.t.ppf(0.5 + level / 2.0, n - 1), rel=1e-12)
    assert origin.c_interval_kpa == (0.0, 0.0)


def test_negative_cohesion_is_flagged() -> None:
    x, y = DATASETS["negative-c"]
    fit = fit_line(x, y)
    assert fit.intercept < 0  # computed: scipy.stats.linregress gives the same sign
    assert stats.linregress(x, y).intercept < 0
    assert fit.negative_cohesion
    assert not fit_through_origin(x, y).negative_cohesion


@pytest.mark.parametrize(
    ("fit", "sigma", "tau", "message"),
    [
        (fit_line, [50.0, 100.0], [30.0, 60.0], "this fit needs at least 3 points, got 2"),
        (fit_line, [], [], "this fit needs at least 3 points, got 0"),
        (fit_through_origin, [50.0], [30.0], "this fit needs at least 2 points, got 1"),
        (fit_line, [100.0, 100.0, 100.0], [55.0, 60.0, 62.0], "all points have the same normal stress"),
        (fit_through_origin, [0.0, 0.0], [1.0, 2.0], "all points have zero normal stress"),
        (fit_line, [50.0, 100.0, 200.0], [30.0, 60.0], "sigma and tau must be 1-D sequences of the same length"),
        (fit_through_origin, [[50.0, 100.0]], [[30.0, 60.0]], "sigma and tau must be 1-D sequences"),
    ],
)
def test_fit_errors(fit: object, sigma: list[float], tau: list[float], message: str) -> None:
    with pytest.raises(ValueError, match=re.escape(message)):
        fit(sigma, tau)  # type: ignore[operator]
