"""Confidence and prediction bands, the curved (power-law) envelope and secant angles."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm

from kernels_helpers.envelope import (
    compare_linear_curved,
    confidence_band,
    fit_line,
    fit_power_law,
    fit_through_origin,
    prediction_band,
    secant_phi_deg,
)

# arbitrary test inputs; the reference is statsmodels (REFERENCES sec. 8, reference library)
DATASETS = {
    "references-sec7": ([50.0, 100.0, 200.0], [38.0, 66.0, 128.0]),
    "scatter": ([40.0, 80.0, 80.0, 160.0, 240.0, 320.0], [35.0, 52.0, 61.0, 101.0, 150.0, 188.0]),
    "negative-c": ([25.0, 50.0, 100.0, 200.0, 400.0], [12.0, 31.0, 60.0, 118.0, 236.0]),
}
GRID = np.array([0.0, 25.0, 60.0, 137.5, 250.0, 500.0])


def _ols(x, y, origin: bool):
    exog = np.asarray(x)[:, None] if origin else sm.add_constant(np.asarray(x))
    model = sm.OLS(np.asarray(y), exog).fit()
    grid = GRID[:, None] if origin else sm.add_constant(GRID)
    return model.get_prediction(grid)


@pytest.mark.parametrize("origin", [False, True], ids=["c-free", "through-origin"])
@pytest.mark.parametrize("name", sorted(DATASETS))
def test_bands_against_statsmodels_get_prediction(name: str, origin: bool) -> None:
    x, y = DATASETS[name]
    fit = fit_through_origin(x, y) if origin else fit_line(x, y)
    pred = _ols(x, y, origin)  # statsmodels OLS get_prediction: REFERENCES sec. 7/8 reference library
    for alpha, level, one_sided in ((0.05, 0.95, False), (0.10, 0.95, True)):  # one-sided 95 % = two-sided 90 %
        lo, hi = confidence_band(fit, GRID, level, one_sided)
        ref = pred.conf_int(alpha=alpha)  # confidence interval of the mean
        assert lo == pytest.approx(ref[:, 0], rel=1e-9, abs=1e-9)
        assert hi == pytest.approx(ref[:, 1], rel=1e-9, abs=1e-9)
        lo, hi = prediction_band(fit, GRID, level, one_sided)
        ref = pred.conf_int(obs=True, alpha=alpha)  # prediction interval for a new observation
        assert lo == pytest.approx(ref[:, 0], rel=1e-9, abs=1e-9)
        assert hi == pytest.approx(ref[:, 1], rel=1e-9, abs=1e-9)


def test_lower_mean_bound_matches_references_sec7_check_set() -> None:
    # REFERENCES sec. 7 [C] (computed from the formula tau_k = a + b sigma - t s sqrt(1/n + ...)):
    # sigma {50, 100, 200}, tau {38, 66, 128}; lower one-sided 95 % bound of the mean line
    fit = fit_line([50.0, 100.0, 200.0], [38.0, 66.0, 128.0])
    assert (fit.intercept, fit.intercept_se) == pytest.approx((7.000, 1.96396), abs=5e-5)  # sec. 7 [C]
    assert (fit.slope, fit.slope_se, fit.residual_sd) == pytest.approx((0.602857, 0.014846, 1.60357), abs=5e-6)
    lower, _ = confidence_band(fit, [50.0, 100.0, 150.0, 200.0], 0.95, one_sided=True)
    assert lower == pytest.approx([28.586, 61.235, 90.801, 117.815], abs=5e-4)  # sec. 7 [C]


def test_prediction_band_is_wider_than_the_confidence_band() -> None:
    x, y = DATASETS["scatter"]
    fit = fit_line(x, y)
    c_lo, c_hi = confidence_band(fit, GRID)
    p_lo, p_hi = prediction_band(fit, GRID)
    assert np.all(p_lo < c_lo) and np.all(p_hi > c_hi)
    # narrowest at the mean stress (common practice: the band is a hyperbola about the centroid)
    fine = np.linspace(0, 400, 4001)
    lo, hi = confidence_band(fit, fine)
    assert fine[np.argmin(hi - lo)] == pytest.approx(np.mean(x), abs=0.1)


# --- power law tau = a sigma^b: REFERENCES sec. 6 -------------------------------------------------

SEC6 = [  # sigma, tau, secant phi, tangent phi: REFERENCES sec. 6 [C], a = 1.2, b = 0.85
    (25.0, 18.511, 36.518, 32.185),
    (100.0, 60.142, 31.024, 27.077),
    (400.0, 195.403, 26.036, 22.550),
]


def test_power_law_recovers_exact_data_and_gives_sec6_angles() -> None:
    sigma = [25.0, 50.0, 100.0, 200.0, 400.0]
    tau = [1.2 * s**0.85 for s in sigma]  # tau = a sigma^b, Atkinson form (REFERENCES sec. 6 [P])
    fit = fit_power_law(sigma, tau)
    assert (fit.a, fit.b) == pytest.approx((1.2, 0.85), rel=1e-6)
    for s, t, phi_s, phi_t in SEC6:
        assert float(fit.tau_kpa(s)) == pytest.approx(t, abs=5e-4)  # sec. 6 [C]
        assert float(fit.phi_secant_deg(s)) == pytest.approx(phi_s, abs=5e-4)  # sec. 6 [C]
        assert float(fit.phi_tangent_deg(s)) == pytest.approx(phi_t, abs=5e-4)  # tan phi_t = b tan phi_s, sec. 6 [C]


def test_power_law_is_least_squares_on_tau_not_on_log_tau() -> None:
    sigma = np.array([20.0, 50.0, 100.0, 200.0, 400.0])
    tau = np.array([21.0, 38.0, 66.0, 118.0, 203.0])
    fit = fit_power_law(sigma, tau)
    # normal equations of the least-squares fit on tau (computed from the formula): dSSE/da = dSSE/db = 0
    r = tau - fit.a * sigma**fit.b
    ga = np.sum(r * sigma**fit.b)
    gb = np.sum(r * fit.a * sigma**fit.b * np.log(sigma))
    assert abs(ga) < 1e-6 * np.sum(sigma**fit.b * tau) and abs(gb) < 1e-6 * np.sum(tau * np.log(sigma) * tau)
    b_log, ln_a = np.polyfit(np.log(sigma), np.log(tau), 1)  # the log-log line minimises relative error
    sse_log = float(np.sum((tau - math.exp(ln_a) * sigma**b_log) ** 2))
    assert fit.sse < sse_log
    assert fit.residual_sd == pytest.approx(math.sqrt(fit.sse / 3))


def test_curvature_comparison_shows_the_pattern_of_a_curved_envelope() -> None:
    sigma = [25.0, 50.0, 100.0, 200.0, 400.0]
    tau = [1.2 * s**0.85 for s in sigma]
    line, power = fit_line(sigma, tau), fit_power_law(sigma, tau)
    cmp = compare_linear_curved(sigma, line, power)
    assert cmp.power_sse < 1e-9 < cmp.line_sse
    assert cmp.line_sse == pytest.approx(sum(r * r for r in line.residuals))
    # a concave envelope lies below its chord-like straight fit at both ends
    assert line.residuals[0] < 0 and line.residuals[-1] < 0 and line.residuals[2] > 0
    assert cmp.statement.endswith("-" + "".join("+" if r > 0 else "-" for r in line.residuals[1:-1]) + "-")


def test_power_law_refuses_zero_stress() -> None:
    with pytest.raises(ValueError, match="positive normal and shear stresses"):
        fit_power_law([0.0, 50.0, 100.0], [1.0, 30.0, 60.0])


def test_secant_angle_per_point() -> None:
    # atan(tau/sigma): tan 30 deg = 0.57735, tan 45 deg = 1 (common practice, trigonometry)
    assert secant_phi_deg([100.0, 50.0], [57.735027, 50.0]) == pytest.approx((30.0, 45.0), abs=1e-5)
