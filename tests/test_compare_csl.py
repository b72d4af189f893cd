"""Per-set comparison (F-test of coincident lines) and the critical-state line."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from kernels_helpers.compare import compare_sets, overlaps_pooled
from kernels_helpers.critical_state import fit_critical_state_line

# arbitrary test inputs; the reference is statsmodels' compare_f_test (extra sum of squares)
SAME = {
    "A": ([50.0, 100.0, 200.0], [36.0, 66.0, 127.0]),
    "B": ([60.0, 120.0, 240.0], [43.5, 77.2, 152.8]),
}
DIFFERENT = {
    "A": ([50.0, 100.0, 200.0], [36.0, 66.0, 127.0]),
    "B": ([50.0, 100.0, 200.0], [48.0, 90.0, 170.0]),
    "C": ([60.0, 120.0, 240.0, 300.0], [40.0, 77.0, 150.0, 186.0]),
}


def _statsmodels_f(sets, origin: bool) -> tuple[float, float]:
    x = np.concatenate([np.asarray(v[0]) for v in sets.values()])
    y = np.concatenate([np.asarray(v[1]) for v in sets.values()])
    labels = np.concatenate([[k] * len(v[0]) for k, v in sets.items()])
    cols = []
    for k in sets:
        ind = (labels == k).astype(float)
        cols += ([] if origin else [ind]) + [ind * x]
    full = sm.OLS(y, np.column_stack(cols)).fit()
    restricted = sm.OLS(y, x[:, None] if origin else sm.add_constant(x)).fit()
    f, p, _ = full.compare_f_test(restricted)
    return float(f), float(p)


@pytest.mark.parametrize("origin", [False, True], ids=["c-free", "through-origin"])
@pytest.mark.parametrize("name", ["same", "different"])
def test_f_test_against_statsmodels_compare_f_test(name: str, origin: bool) -> None:
    sets = SAME if name == "same" else DIFFERENT
    cmp = compare_sets(sets, through_origin=origin)
    f, p = _statsmodels_f(sets, origin)  # statsmodels RegressionResults.compare_f_test (reference library)
    assert cmp.f_value == pytest.approx(f, rel=1e-9)
    assert cmp.p_value == pytest.approx(p, rel=1e-9, abs=1e-15)
    k, n = len(sets), sum(len(v[0]) for v in sets.values())
    assert cmp.dof == ((1 if origin else 2) * (k - 1), n - (1 if origin else 2) * k)


def test_statement_says_whether_the_sets_belong_together() -> None:
    same, different = compare_sets(SAME), compare_sets(DIFFERENT)
    assert same.p_value > 0.05 and "no evidence that the sets differ" in same.statement
    assert different.p_value < 0.05 and "the sets differ" in different.statement
    assert "F-test of coincident lines" in same.method
    assert overlaps_pooled(same.fits[0], same.pooled)


def test_sets_with_too_few_points_are_left_out_with_a_reason() -> None:
    cmp = compare_sets({"A": SAME["A"], "B": SAME["B"], "thin": ([80.0, 160.0], [50.0, 99.0])})
    assert cmp.sets == ("A", "B")
    assert cmp.left_out == ("thin: 2 point(s), a fit with its own interval needs 3",)
    alone = compare_sets({"A": SAME["A"]})
    assert alone.pooled is None and alone.p_value is None and "nothing to compare" in alone.statement


def test_critical_state_line_against_linregress_on_log_stress() -> None:
    sigma = [60.9, 121.8, 244.0, 61.1, 122.1, 243.6]
    e = [0.781, 0.752, 0.731, 0.776, 0.749, 0.728]
    csl = fit_critical_state_line(list("abcdef"), ["dense"] * 3 + ["loose"] * 3, sigma, e, [0.6] * 3 + [0.8] * 3)
    ref = stats.linregress(np.log(sigma), e)  # scipy.stats.linregress on ln(sigma') (reference library)
    assert csl.lambda_ == pytest.approx(-ref.slope, rel=1e-10)
    assert csl.e_1kpa == pytest.approx(ref.intercept, rel=1e-10)
    assert csl.fit.slope_se == pytest.approx(ref.stderr, rel=1e-9)


def test_critical_state_line_recovers_an_exact_line() -> None:
    # e = Gamma - lambda ln(sigma'), Gamma 1.0, lambda 0.05 (computed from the formula)
    sigma = [50.0, 100.0, 200.0, 400.0]
    e = [1.0 - 0.05 * math.log(s) for s in sigma]
    csl = fit_critical_state_line(list("abcd"), [""] * 4, sigma, e, e)
    assert (csl.lambda_, csl.e_1kpa) == pytest.approx((0.05, 1.0), rel=1e-9)
    assert csl.e_at(100.0) == pytest.approx(1.0 - 0.05 * math.log(100.0))
    with pytest.raises(ValueError, match="positive normal stresses"):
        fit_critical_state_line(list("ab"), ["", ""], [0.0, 10.0], [0.7, 0.6], [0.7, 0.6])
