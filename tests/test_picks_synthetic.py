"""Suggested picks and flags on synthetic curves with known answers (tests/synthetic.py).

The model is Taylor's stress-dilatancy relation for the shear box (Taylor 1948; REFERENCES sec. 5);
the expected answers are its noise-free closed forms. Tolerances are those the picks issue sets:
peak within 1 %, critical-state stress ratio within 0.01, the right flags and no false ones.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from synthetic import Model, readings, write_project

from kernels_helpers import interpret
from kernels_helpers.multistage import split_by_normal_load
from kernels_helpers.reversal import label_passes


def _one(tmp_path: Path, m: Model, test_type: str = "single-stage"):
    write_project(tmp_path / "p", {"S1": (readings(m), m.normal_n, test_type)})
    return interpret(tmp_path / "p").stage("S1")


DENSE = [Model(normal_n=180, psi_max=11, u_peak=1.7, seed=1), Model(normal_n=360, psi_max=9.5, u_peak=2.0, seed=2),
         Model(normal_n=720, psi_max=8, u_peak=2.4, u_mob=0.5, seed=3)]


@pytest.mark.parametrize("m", DENSE, ids=["50kPa", "100kPa", "200kPa"])
def test_dense_peak_and_critical_state(tmp_path: Path, m: Model) -> None:
    s = _one(tmp_path, m)
    u_peak, tau_peak = m.true_peak()
    assert s.no_distinct_peak is None
    assert s.peak.chosen.tau_kpa == pytest.approx(tau_peak, rel=0.01)  # issue: peak within 1 % of the model's
    assert s.peak.chosen.x_mm == pytest.approx(u_peak, abs=0.3)
    assert s.critical_state.chosen.ratio == pytest.approx(m.cs_ratio, abs=0.01)  # ratio within 0.01
    assert s.reduced.seating_shift_mm == pytest.approx(m.slack, abs=0.05)
    assert s.flags == ()  # clean curve: no false flag


@pytest.mark.parametrize("normal", [180.0, 720.0])
def test_loose_has_no_distinct_peak(tmp_path: Path, normal: float) -> None:
    m = Model(normal_n=normal, psi_max=0.0, contraction=0.08, u_mob=1.0, seed=4)
    s = _one(tmp_path, m)
    assert s.no_distinct_peak is not None and s.no_distinct_peak.startswith("no distinct peak")
    assert s.critical_state.chosen.ratio == pytest.approx(m.cs_ratio, abs=0.01)
    assert s.flags == ()


def test_stopped_early_is_flagged(tmp_path: Path) -> None:
    m = Model(normal_n=360, psi_max=10, u_peak=2.0, travel=4.0, seed=5)
    s = _one(tmp_path, m)
    assert any(f.startswith("critical state not reached: still dilating") for f in s.flags), s.flags
    assert s.peak.chosen.tau_kpa == pytest.approx(m.true_peak()[1], rel=0.01)


def test_stick_slip_is_flagged_and_clean_curve_is_not(tmp_path: Path) -> None:
    noisy = _one(tmp_path / "a", Model(normal_n=360, stick_slip=0.05, seed=6))
    assert any(f.startswith("stick-slip or noise near the peak") for f in noisy.flags), noisy.flags
    clean = _one(tmp_path / "b", Model(normal_n=360, seed=6))
    assert not any("stick-slip" in f for f in clean.flags)


def test_peak_far_from_maximum_dilation_is_flagged(tmp_path: Path) -> None:
    m = Model(normal_n=360, seed=7)
    write_project(tmp_path / "p", {"S1": (readings(m), m.normal_n, "single-stage")})
    from kernels_helpers.interpretation import Interpretation

    s = interpret(tmp_path / "p", Interpretation().with_peak("S1", 5.5, "tester", "deliberately late")).stage("S1")
    assert any(f.startswith("peak at 5.50 mm but maximum rate of dilation at") for f in s.flags), s.flags


def _reversal_readings(passes: list[float]) -> tuple[dict[str, np.ndarray], list[float]]:
    """Forward 8 mm, back to 0, forward... Each pass k ends on the stress ratio passes[k//2]."""
    parts_x, parts_f, ends = [], [], []
    normal = 360.0
    for k, r_end in enumerate(passes):
        forward = k % 2 == 0
        x = np.linspace(0.0, 8.0, 801) if forward else np.linspace(8.0, 0.0, 801)
        u = x if forward else 8.0 - x
        ratio = r_end * np.tanh(u / 0.3) if k else Model().ratio(np.clip(u - 0.2, 0, None))
        sign = 1.0 if forward else -1.0
        parts_x.append(x if k == 0 else x[1:])
        parts_f.append((sign * ratio * normal) if k == 0 else (sign * ratio * normal)[1:])
        ends.append(float(np.mean(ratio[u >= 6.0]) * normal / (60 * (60 - np.mean(x[u >= 6.0]))) * 1000))
    x = np.concatenate(parts_x)
    f = np.concatenate(parts_f) + np.random.default_rng(8).normal(0, 0.5, len(x))
    return {"t": np.arange(len(x)) * 2.0, "x": x, "y": np.zeros(len(x)), "f": f}, ends


def test_reversal_passes_and_residual(tmp_path: Path) -> None:
    ratios = [0.62, 0.55, 0.48, 0.45, 0.40, 0.40, 0.395]  # passes 1..7; forward passes 1, 3, 5, 7
    cols, ends = _reversal_readings(ratios)
    assert label_passes(cols["x"]).max() == len(ratios)
    write_project(tmp_path / "p", {"R1": (cols, 360.0, "reversal")})
    s = interpret(tmp_path / "p").stage("R1")
    fwd = [p for p in s.passes if p.forward]
    assert [p.pass_no for p in fwd] == [1, 3, 5, 7]
    assert s.residual is not None and s.residual.chosen.reached and s.residual.chosen.passes == (5, 7)
    assert s.residual.chosen.tau_kpa == pytest.approx(ends[6], rel=0.02)
    # the critical state of the first pass only
    assert s.critical_state.chosen.ratio == pytest.approx(Model().cs_ratio, abs=0.01)


def test_reversal_not_reached_is_flagged(tmp_path: Path) -> None:
    cols, _ = _reversal_readings([0.62, 0.55, 0.50, 0.45, 0.42])
    write_project(tmp_path / "p", {"R1": (cols, 360.0, "reversal")})
    s = interpret(tmp_path / "p").stage("R1")
    assert s.residual is not None and not s.residual.chosen.reached
    assert any(f.startswith("residual not reached: the last two forward passes (3, 5) differ by") for f in s.flags)


def test_multistage_split_by_normal_load(tmp_path: Path) -> None:
    levels = [180.0, 360.0, 720.0]
    xs, fs, ns = [], [], []
    for k, n in enumerate(levels):
        m = Model(normal_n=n, psi_max=0.0, u_mob=0.3, slack=0.0, noise_n=0.3, seed=10 + k)
        x = np.linspace(4.0 * k, 4.0 * (k + 1), 1001)
        u = x - 4.0 * k
        xs.append(x)
        fs.append(m.ratio(u) * n)
        ns.append(np.full(len(x), n))
        if k < len(levels) - 1:  # the normal load is raised at constant x: 20 transition readings
            ramp = np.linspace(n, levels[k + 1], 22)[1:-1]
            xs.append(np.full(len(ramp), x[-1]))
            fs.append(np.full(len(ramp), fs[-1][-1]))
            ns.append(ramp)
    x, f, n = np.concatenate(xs), np.concatenate(fs), np.concatenate(ns)
    rng = np.random.default_rng(3)
    n_noisy = n + rng.normal(0, 0.5, len(n))
    steps = split_by_normal_load(n_noisy)
    assert [round(s.force_n) for s in steps] == levels
    cols = {"t": np.arange(len(x)) * 2.0, "x": x, "y": np.zeros(len(x)), "f": f + rng.normal(0, 0.3, len(x)),
            "n": n_noisy}
    write_project(tmp_path / "p", {"M1": (cols, 180.0, "multi-stage")}, normal_column=True)
    results = interpret(tmp_path / "p")
    assert [s.stage_id for s in results.stages] == ["M1/1", "M1/2", "M1/3"]
    for s, level in zip(results.stages, levels, strict=True):
        assert s.reduced.normal_force_n == pytest.approx(level, rel=0.005)
        assert s.critical_state.chosen.ratio == pytest.approx(Model().cs_ratio, abs=0.01)
    # later stages continue from the first stage's origin: the area keeps shrinking
    assert results.stages[2].reduced.curve["area_mm2"].iloc[-1] == pytest.approx(60 * (60 - 12.0), rel=0.01)
    env = results.envelope("synthetic", "critical_state")
    assert env.chosen is not None and env.chosen.phi_deg == pytest.approx(32.0, abs=0.5)


def test_manual_residual_pick_on_a_pass(tmp_path: Path) -> None:
    from kernels_helpers.interpretation import Interpretation

    cols, ends = _reversal_readings([0.62, 0.55, 0.48, 0.45, 0.42])
    write_project(tmp_path / "p", {"R1": (cols, 360.0, "reversal")})
    interp = Interpretation().with_residual("R1", 5, 6.0, 8.0, "tester", "last pass, end of travel")
    s = interpret(tmp_path / "p", interp).stage("R1")
    assert s.residual is not None and s.residual.source == "manual" and s.residual.chosen.reached
    assert s.residual.chosen.tau_kpa == pytest.approx(ends[4], rel=0.01)  # the model's end-of-pass stress on pass 5
    assert s.residual.suggested is not None and not s.residual.suggested.reached  # the rule's view stays recorded
    assert not any(f.startswith("residual not reached") for f in s.flags)
    env = interpret(tmp_path / "p", interp).envelope("synthetic", "residual")
    assert env.stage_ids == ("R1",)
    with pytest.raises(ValueError, match="holds 0 readings"):
        interpret(tmp_path / "p", Interpretation().with_residual("R1", 5, 20.0, 21.0, "tester"))
