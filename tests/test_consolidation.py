"""Consolidation stage: Casagrande and Taylor constructions on Terzaghi curves, and the rate check."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pytest

from kernels_helpers import Interpretation, interpret
from kernels_helpers.consolidation import T50, T90, analyse_consolidation, rate_check, terzaghi_u
from kernels_helpers.interpretation import Settings
from kernels_helpers.settings import RateSettings

EXAMPLE = Path(__file__).resolve().parent.parent / "example_project"
H0 = 20.0  # mm


def terzaghi_curve(cv: float, immediate: float = 0.03, primary: float = 0.10, secondary: float = 0.004,
                   per_decade: int = 20, t_end: float = 86400.0) -> tuple[np.ndarray, np.ndarray]:
    """Settlement (mm): immediate offset + primary by the exact series (H_dr = H0/2) + secondary per log cycle."""
    t = np.concatenate([[0.0], np.logspace(0.0, math.log10(t_end), int(per_decade * math.log10(t_end)) + 1)])
    t90 = T90 * (H0 / 2) ** 2 / cv
    d = np.where(t > 0, immediate, 0.0) + primary * terzaghi_u(cv * t / (H0 / 2) ** 2)
    return t, d + secondary * np.log10(1.0 + t / t90)


def test_exact_series_time_factors() -> None:
    # REFERENCES sec. 2: exact series T_50 = 0.1967, T_90 = 0.8481 [C], published 0.197 / 0.848 [P]
    np.testing.assert_allclose(terzaghi_u(np.array([0.1967, 0.8481])), [0.5, 0.9], atol=2e-4)
    # T = (pi/4) U^2 for U <= 0.6 [P]
    u = np.array([0.2, 0.4, 0.6])
    np.testing.assert_allclose(terzaghi_u(np.pi / 4 * u**2), u, rtol=1e-2)  # an approximation: 0.6 % off at U = 0.6
    # T = 1.781 - 0.933 log10(100 - U%) for U > 60 % [P]
    u_pct = np.array([70.0, 80.0, 95.0])
    np.testing.assert_allclose(terzaghi_u(1.781 - 0.933 * np.log10(100 - u_pct)) * 100, u_pct, atol=0.2)


CASES = [  # c_v (mm2/s), immediate, primary, secondary per log cycle (mm)
    (0.05, 0.03, 0.10, 0.004),
    (0.5, 0.03, 0.10, 0.004),
    (0.01, 0.0, 0.10, 0.002),
    (0.05, 0.05, 0.20, 0.0),
    (2.0, 0.02, 0.15, 0.006),
]


@pytest.mark.parametrize(("cv", "immediate", "primary", "secondary"), CASES)
def test_both_constructions_return_the_input_cv(cv: float, immediate: float, primary: float, secondary: float) -> None:
    t, d = terzaghi_curve(cv, immediate, primary, secondary)
    r = analyse_consolidation(t, d, H0)
    assert r.flags == ()
    assert r.casagrande is not None and r.taylor is not None
    # common practice (REFERENCES sec. 2): both methods give back the input c_v within a few per cent
    assert r.casagrande.cv_mm2_s == pytest.approx(cv, rel=0.03)
    assert r.taylor.cv_mm2_s == pytest.approx(cv, rel=0.03)
    assert r.casagrande.d0_mm == pytest.approx(immediate, abs=0.02 * primary)  # the immediate offset is found
    assert r.taylor.d0_mm == pytest.approx(immediate, abs=0.02 * primary)


def test_large_secondary_slope_moves_taylor_more() -> None:
    # a secondary slope of 10 % of the primary per cycle: root time reads t_90 late (c_v low), log time holds
    r = analyse_consolidation(*terzaghi_curve(0.05, secondary=0.01), H0)
    assert r.casagrande.cv_mm2_s == pytest.approx(0.05, rel=0.03)
    assert 0.85 < r.taylor.cv_mm2_s / 0.05 < 0.97


def test_record_too_short_for_casagrande() -> None:
    cv = 0.05
    t_end = 2.0 * T90 * (H0 / 2) ** 2 / cv  # stops at T = 1.7: no secondary branch
    r = analyse_consolidation(*terzaghi_curve(cv, t_end=t_end), H0)
    assert r.casagrande is None and r.taylor is not None
    assert any(f.startswith("Casagrande log-time: the readings end") and "record the consolidation for longer" in f
               for f in r.flags)


def test_declared_settlement_disagreeing_is_flagged() -> None:
    t, d = terzaghi_curve(0.05)
    r = analyse_consolidation(t, d, H0, declared_settlement_mm=0.5)
    assert any(f.startswith("consolidation_settlement_mm 0.5 mm in the project file differs") for f in r.flags)
    assert analyse_consolidation(t, d, H0, declared_settlement_mm=float(d[-1])).flags == ()


def test_rate_check_rule_and_flag() -> None:
    cv = 0.05
    r = analyse_consolidation(*terzaghi_curve(cv), H0)
    t50 = T50 * (H0 / 2) ** 2 / cv  # 394 s
    time = np.arange(0.0, 3600.0, 10.0)
    x = 0.1 / 60.0 * time  # 0.1 mm/min
    failure = int(np.searchsorted(time, 1200.0))  # 20 min to failure
    check = rate_check(time, x, 0, failure, r)
    assert check is not None
    assert check.rate_mm_min == pytest.approx(0.1, rel=1e-9)
    assert check.time_to_failure_s == 1200.0
    # ASTM rule t_f = 50 t_50 [P, secondary]; 11.6 t_90 [M]; 12.7 t_100 [M]: all near 50 t_50 = 329 min here
    assert sorted(k.split(" (")[0] for k in check.candidates_s) == ["t_f = 11.6 t_90", "t_f = 12.7 t_100",
                                                                     "t_f = 50 t_50"]
    assert check.required_s == max(check.candidates_s.values())
    assert check.required_s == pytest.approx(50 * t50, rel=0.05)
    assert check.too_fast
    assert check.flag.startswith("too fast for drained conditions: failure reached after 20.0 min at 2.00 mm")
    assert f"by {check.rule}" in check.flag
    slow = rate_check(time * 100, x, 0, failure, r)
    assert slow is not None and not slow.too_fast and slow.flag is None
    # one rule by name (the governing standard's): that one is required, every candidate still reported.
    # Factors: 50 t_50 ASTM D3080, 11.6 t_90 its root-time equivalent, 12.7 t_100 BS 1377-7 after
    # Gibson & Henkel 1954 (REFERENCES sec. 1)
    for rule, factor, t_cons in (("50 t_50", 50.0, r.casagrande.t50_s), ("11.6 t_90", 11.6, r.taylor.t90_s),
                                 ("12.7 t_100", 12.7, r.taylor.t100_s)):
        named = rate_check(time, x, 0, failure, r, rule)
        assert named is not None and named.rule.startswith(f"t_f = {rule} (")
        assert named.required_s == factor * t_cons and named.candidates_s == check.candidates_s
        assert f"by {named.rule}" in named.flag


def test_a_named_rule_without_its_construction_gives_no_check_and_says_so(monkeypatch: pytest.MonkeyPatch) -> None:
    from kernels_helpers import stage_checks

    r = analyse_consolidation(*terzaghi_curve(0.05), H0)
    short = dataclasses.replace(r, casagrande=None)  # e.g. a stage stopped before the secondary branch: no t_50
    time = np.arange(0.0, 3600.0, 10.0)
    x = 0.1 / 60.0 * time
    assert rate_check(time, x, 0, 120, short, "50 t_50") is None
    assert rate_check(time, x, 0, 120, short).rule.startswith("t_f = 12.7 t_100")  # the largest of those left
    monkeypatch.setattr(stage_checks, "analyse_consolidation", lambda *a, **k: short)
    results = interpret(EXAMPLE, Interpretation(settings=Settings(rate=RateSettings("50 t_50"))))
    for s in results.stages:
        assert s.rate is None
        assert (f"no drained-rate check: the rule t_f = 50 t_50 chosen in the settings needs a time the "
                f"consolidation stage (readings/{s.stage_id}-consolidation.csv) did not give") in s.flags


def test_the_rule_is_a_setting_of_the_interpretation() -> None:
    results = interpret(EXAMPLE, Interpretation(settings=Settings(rate=RateSettings("12.7 t_100"))))
    for s in results.stages:
        assert s.rate is not None and s.rate.rule.startswith("t_f = 12.7 t_100 (")
    assert json.loads(results.to_json())["settings"]["rate"] == {"time_to_failure": "12.7 t_100"}
    default = interpret(EXAMPLE, Interpretation())
    for s in default.stages:
        assert s.rate.required_s == max(s.rate.candidates_s.values())


def test_example_project_consolidation_and_rate() -> None:
    results = interpret(EXAMPLE, Interpretation())
    truth = {s["id"]: s for s in json.loads((EXAMPLE / "model_truth.json").read_text())["stages"]}
    for s in results.stages:
        cv = truth[s.stage_id]["consolidation_cv_mm2_s"]  # invented model value (make_example.py)
        assert s.consolidation.casagrande.cv_mm2_s == pytest.approx(cv, rel=0.05)
        assert s.consolidation.taylor.cv_mm2_s == pytest.approx(cv, rel=0.10)  # noisy readings, secondary 5 %
        too_fast = [f for f in s.flags if f.startswith("too fast for drained conditions")]
        assert bool(too_fast) == (s.stage_id == "BH03-D3")  # D3 is slow on purpose in make_example.py
    data = json.loads(results.to_json())
    d3 = next(s for s in data["stages"] if s["id"] == "BH03-D3")
    assert d3["rate_check"]["too_fast"] is True and d3["consolidation"]["casagrande"]["cv_m2_yr"] > 0
    assert "readings/BH03-D3-consolidation.csv" in data["provenance"]["raw_files"]
