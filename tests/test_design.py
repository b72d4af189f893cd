"""Characteristic and design values: k_n, the sec. 7 check sets, regression bounds, partial factors."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from kernels_helpers.design import (
    PARTIAL_FACTOR_SETS,
    TABLE_D1,
    design_values,
    kn_fractile,
    kn_fractile_formula,
    kn_mean,
    regression_characteristic,
    tan_phi_statistics,
)
from kernels_helpers.envelope import confidence_band, fit_line, fit_through_origin, prediction_band

# EN 1990 Annex D Table D1, 5 % fractile (REFERENCES sec. 7 [P, secondary; matches memory])
D1_N = [3, 4, 5, 6, 8, 10, 20, 30]
D1_KNOWN = [1.89, 1.83, 1.80, 1.77, 1.74, 1.72, 1.68, 1.67]
D1_UNKNOWN = [3.37, 2.63, 2.33, 2.18, 2.00, 1.92, 1.76, 1.73]


@pytest.mark.parametrize(("n", "known", "unknown"), list(zip(D1_N, D1_KNOWN, D1_UNKNOWN, strict=True)))
def test_kn_formula_against_en1990_table_d1(n: int, known: float, unknown: float) -> None:
    # REFERENCES sec. 7: V known ~ 1.64 sqrt(1 + 1/n), V unknown ~ t_{n-1,0.95} sqrt(1 + 1/n).
    # The printed 1.76 at n = 20 is below the formula (1.7718): REFERENCES says 0.01; it is 0.012.
    tol_unknown = 0.012 if n == 20 else 0.01
    assert kn_fractile_formula(n, v_known=True) == pytest.approx(known, abs=0.01)
    assert kn_fractile_formula(n, v_known=False) == pytest.approx(unknown, abs=tol_unknown)


def test_kn_tends_to_the_normal_quantile() -> None:
    # Table D1 n = infinity: 1.64 for both (REFERENCES sec. 7 [P, secondary])
    assert TABLE_D1["V known"][0] == TABLE_D1["V unknown"][0] == 1.64
    assert kn_fractile_formula(100000, True) == pytest.approx(1.64, abs=0.005)
    assert kn_fractile_formula(100000, False) == pytest.approx(1.64, abs=0.005)


def test_kn_uses_the_table_where_tabulated_and_the_formula_elsewhere() -> None:
    assert kn_fractile(5, v_known=False) == (2.33, "EN 1990 Table D1, n = 5, V unknown")  # Table D1 [P, secondary]
    k7, source = kn_fractile(7, v_known=False)
    assert k7 == pytest.approx(stats.t.ppf(0.95, 6) * math.sqrt(1 + 1 / 7))  # t formula, computed from the formula
    assert "not tabulated" in source


@pytest.mark.parametrize(("n", "k"), [(3, 1.686), (5, 0.953), (10, 0.580)])
def test_kn_of_the_cautious_mean(n: int, k: float) -> None:
    assert kn_mean(n, v_known=False) == pytest.approx(k, abs=5e-4)  # t_{n-1,0.95}/sqrt(n), REFERENCES sec. 7 [M]/[C]


TAN_PHI = [0.620, 0.650, 0.600, 0.640, 0.610]  # REFERENCES sec. 7 check set [C]


def test_tan_phi_set_fractile_mean_and_schneider() -> None:
    local = tan_phi_statistics(TAN_PHI, "local")
    assert (local.mean, local.sd) == pytest.approx((0.624, 0.020736), abs=5e-7)  # sec. 7 [C], sample s.d.
    assert local.kn == 2.33  # Table D1, n = 5, V unknown
    assert local.tan_phi_k == pytest.approx(0.57568, abs=5e-6)  # sec. 7 [C]
    assert local.phi_k_deg == pytest.approx(29.93, abs=5e-3)  # sec. 7 [C]
    assert local.schneider == pytest.approx(0.61363, abs=5e-6)  # Schneider (1997) m (1 - 0.5 V), sec. 7 [M]/[C]
    mean = tan_phi_statistics(TAN_PHI, "large zone")
    assert mean.kn == pytest.approx(0.95339, abs=5e-6)  # sec. 7 [C]
    assert mean.tan_phi_k == pytest.approx(0.60423, abs=5e-6)  # sec. 7 [C]
    assert mean.phi_k_deg == pytest.approx(31.14, abs=5e-3)  # sec. 7 [C]


def test_tan_phi_with_a_known_coefficient_of_variation() -> None:
    # EN 1990 D7.2 (V known): X_k = m (1 - k_n V), k_n = 1.80 at n = 5 (Table D1); computed from the formula
    st = tan_phi_statistics(TAN_PHI, "local", v_known=0.10)
    assert st.v_known and st.kn == 1.80
    assert st.tan_phi_k == pytest.approx(0.624 * (1 - 1.80 * 0.10))


def test_tan_phi_statistics_need_three_values() -> None:
    with pytest.raises(ValueError, match="at least 3 values, got 2"):
        tan_phi_statistics([0.6, 0.62], "local")


SEC7_SIGMA, SEC7_TAU = [50.0, 100.0, 200.0], [38.0, 66.0, 128.0]  # REFERENCES sec. 7 [C]
SEC7_LOWER = {50.0: 28.586, 100.0: 61.235, 150.0: 90.801, 200.0: 117.815}  # lower mean bound, sec. 7 [C]


def test_regression_characteristic_tangent_and_secant_forms_from_sec7() -> None:
    fit = fit_line(SEC7_SIGMA, SEC7_TAU)
    tan = regression_characteristic(fit, (50.0, 200.0), "large zone", "tangent", n_grid=4)
    assert tan.tau_bound_kpa == pytest.approx(list(SEC7_LOWER.values()), abs=5e-4)
    slope = (117.815 - 28.586) / 150.0  # the line through the bound at both ends, from the sec. 7 values
    assert tan.tan_phi_k == pytest.approx(slope, abs=1e-5)
    assert tan.c_k_kpa == pytest.approx(28.586 - slope * 50.0, abs=5e-4)
    assert tan.c_k_kpa < 0 and any("negative" in f for f in tan.flags)
    sec = regression_characteristic(fit, (50.0, 200.0), "large zone", "secant", n_grid=4)
    assert sec.c_k_kpa == 0.0
    assert sec.tan_phi_k == pytest.approx(28.586 / 50.0, abs=1e-5)  # min of tau_k/sigma is at 50 kPa (sec. 7 values)
    assert "secant form" in sec.method and "mean line" in sec.method


def test_tangent_line_lies_on_or_below_the_bound_inside_the_range() -> None:
    fit = fit_line([40.0, 80.0, 80.0, 160.0, 240.0, 320.0], [35.0, 52.0, 61.0, 101.0, 150.0, 188.0])
    for limit_state, band in (("large zone", confidence_band), ("local", prediction_band)):
        ch = regression_characteristic(fit, (60.0, 300.0), limit_state, "tangent")
        fine = np.linspace(60.0, 300.0, 1001)
        bound = band(fit, fine, 0.95, one_sided=True)[0]
        assert np.all(ch.c_k_kpa + ch.tan_phi_k * fine <= bound + 1e-9)
        sec = regression_characteristic(fit, (60.0, 300.0), limit_state, "secant")
        assert np.all(sec.tan_phi_k * fine <= bound + 1e-9)
    local = regression_characteristic(fit, (60.0, 300.0), "local", "secant")
    zone = regression_characteristic(fit, (60.0, 300.0), "large zone", "secant")
    assert local.tan_phi_k < zone.tan_phi_k  # the prediction bound lies below the mean bound


def test_through_origin_mean_bound_is_the_slope_bound() -> None:
    fit = fit_through_origin(SEC7_SIGMA, SEC7_TAU)
    ch = regression_characteristic(fit, (50.0, 200.0), "large zone", "tangent")
    # for c' = 0 the bound is sigma (b - t_{n-1,0.95} SE_b): REFERENCES sec. 8 through-origin regression, computed
    expected = fit.slope - stats.t.ppf(0.95, fit.dof) * fit.slope_se
    assert ch.tan_phi_k == pytest.approx(expected, rel=1e-9)
    assert ch.c_k_kpa == pytest.approx(0.0, abs=1e-9)


def test_design_range_outside_the_tests_is_flagged_and_bad_range_refused() -> None:
    fit = fit_line(SEC7_SIGMA, SEC7_TAU)
    ch = regression_characteristic(fit, (20.0, 250.0), "large zone", "secant", tested_kpa=(50.0, 200.0))
    assert any("extrapolated" in f for f in ch.flags)
    with pytest.raises(ValueError, match="0 < low < high"):
        regression_characteristic(fit, (0.0, 200.0), "large zone", "secant")


def test_partial_factor_defaults_are_en1997_table_a4() -> None:
    # EN 1997-1 Annex A Table A.4 (REFERENCES sec. 7 [P]): gamma_phi' and gamma_c' M1 1.0/1.0, M2 1.25/1.25
    assert PARTIAL_FACTOR_SETS == {"M1": (1.0, 1.0), "M2": (1.25, 1.25)}


def test_design_values_apply_the_factor_to_tan_phi() -> None:
    d = design_values(5.0, math.tan(math.radians(32.0)), "M2", 1.25, 1.25)
    # tan phi'_d = tan 32 deg / 1.25 = 0.49990 -> 26.56 deg; c'_d = 4 kPa (computed from the formula)
    assert d.phi_d_deg == pytest.approx(math.degrees(math.atan(math.tan(math.radians(32.0)) / 1.25)))
    assert d.phi_d_deg == pytest.approx(26.56, abs=0.01)
    assert d.c_d_kpa == pytest.approx(4.0)
    with pytest.raises(ValueError, match="partial factors must be positive"):
        design_values(5.0, 0.6, "x", 0.0, 1.0)
