"""interpret(): behaviour on the example project, and closed-form synthetic stages."""

from __future__ import annotations

import dataclasses
import hashlib
import math
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from kernels_helpers import Interpretation, interpret, load_project, save_interpretation
from kernels_helpers.interpretation import Pick, StageDecision
from kernels_helpers.project import Project
from kernels_helpers.results import Results

EXAMPLE = Path(__file__).resolve().parents[1] / "example_project"
DENSE = ("BH03-D1", "BH03-D2", "BH03-D3")

# --- the example project (invented data: behaviour only, never a reference value) -------------


@pytest.fixture(scope="module")
def example() -> Project:
    return load_project(EXAMPLE)


@pytest.fixture(scope="module")
def dense(example: Project) -> Project:
    return dataclasses.replace(example, stages=tuple(s for s in example.stages if s.id in DENSE))


@pytest.fixture(scope="module")
def baseline(example: Project) -> Results:
    return interpret(example, Interpretation())


def test_interpret_returns_stages_and_envelopes(baseline: Results, example: Project) -> None:
    assert [s.stage_id for s in baseline.stages] == [s.id for s in example.stages]
    kinds = {(e.group, e.kind) for e in baseline.envelopes}
    for group in ("BH03 dense", "BH03 loose", "stratum B (all sets)"):
        assert {(group, "peak"), (group, "critical_state")} <= kinds
    cs = baseline.envelope("BH03 dense", "critical_state")
    assert cs.stage_ids == DENSE and cs.free is not None and cs.origin is not None
    assert all(not s.stale for s in baseline.stages)


def test_two_runs_give_identical_json(baseline: Results, example: Project) -> None:
    # from the path, with the project's own interpretation.json, twice: bit-identical text
    assert interpret(EXAMPLE).to_json().encode() == interpret(EXAMPLE).to_json().encode()
    assert interpret(example, Interpretation()).to_json().encode() == baseline.to_json().encode()


def test_provenance_hashes_the_raw_files(baseline: Results) -> None:
    for stage in baseline.stages:
        digest = hashlib.sha256((EXAMPLE / stage.relpath).read_bytes()).hexdigest()
        assert stage.sha256 == digest
        assert baseline.provenance["raw_files"][stage.relpath]["sha256"] == digest


def test_excluding_a_stage_removes_it_from_the_envelopes(dense: Project) -> None:
    before = interpret(dense, Interpretation())
    assert "BH03-D2" in before.envelope("BH03 dense", "peak").stage_ids
    decision = StageDecision(included=False, exclusion_reason="specimen disturbed (test)")
    after = interpret(dense, Interpretation().with_decision("BH03-D2", decision))
    for env in after.envelopes:
        assert "BH03-D2" not in env.stage_ids
    peak = after.envelope("BH03 dense", "peak")
    assert peak.stage_ids == ("BH03-D1", "BH03-D3")
    assert peak.free is None and peak.origin is not None  # c' free needs 3 stages, c' = 0 needs 2
    assert peak.not_fitted is not None and peak.not_fitted.startswith("2 included stage(s)")
    stage = after.stage("BH03-D2")
    assert (stage.included, stage.exclusion_reason) == (False, "specimen disturbed (test)")


def test_manual_peak_snaps_to_the_nearest_reading(example: Project, baseline: Results) -> None:
    picks = {"BH03-D1": 3.0, "BH03-L1": 4.2}
    interp = Interpretation()
    for sid, x in picks.items():
        interp = interp.with_decision(sid, StageDecision(peak=Pick(source="manual", x_mm=x, author="T")))
    results = interpret(example, interp)
    for sid, x in picks.items():
        stage = results.stage(sid)
        curve = stage.reduced.curve[stage.reduced.curve["in_shear"]]
        nearest = curve.index[int(np.argmin(np.abs(curve["x_mm"].to_numpy() - x)))]
        assert stage.peak.chosen.index == nearest
        assert stage.peak.chosen.x_mm == curve.loc[nearest, "x_mm"]
        assert stage.peak.chosen.tau_kpa == curve.loc[nearest, "tau_smooth_kpa"]
        assert stage.peak.source == "manual" and stage.no_distinct_peak is None
        assert stage.peak.suggested == baseline.stage(sid).peak.suggested  # the suggestion is kept
    assert results.stage("BH03-D1").peak.chosen.x_mm != baseline.stage("BH03-D1").peak.chosen.x_mm
    # the loose stage had no distinct peak; picked on purpose it joins the stratum's peak envelope
    assert "BH03-L1" not in baseline.envelope("stratum B (all sets)", "peak").stage_ids
    assert "BH03-L1" in results.envelope("stratum B (all sets)", "peak").stage_ids


def test_stale_raw_file_is_flagged(dense: Project) -> None:
    good = hashlib.sha256((EXAMPLE / "readings/BH03-D3.csv").read_bytes()).hexdigest()
    interp = Interpretation(raw_files={"readings/BH03-D1.csv": "0" * 64, "readings/BH03-D3.csv": good})
    interp = interp.with_decision("BH03-D1", StageDecision(peak=Pick(source="manual", x_mm=2.0)))
    results = interpret(dense, interp)
    d1 = results.stage("BH03-D1")
    assert d1.stale
    message = next(f for f in d1.flags if f.startswith("raw file "))
    assert message.startswith("raw file readings/BH03-D1.csv changed since the interpretation was saved")
    assert "review the peak pick(s)" in message
    assert not results.stage("BH03-D2").stale and not results.stage("BH03-D3").stale


# --- synthetic stages from closed-form curves -------------------------------------------------

SIDE = 60.0  # mm, square box
SLACK = 0.3  # mm of seating slack written into the readings
STEP = 0.005  # mm between readings
TRAVEL = 12.0  # mm of travel after the slack
MU, A, UP = 0.6, 0.25, 1.5  # dilating curve: critical ratio, hump height, displacement at max rate (mm)

TOML = """\
schema = "shearbook.project/1"
[stage_defaults.specimen]
shape = "square"
side_mm = 60.0
height_mm = 20.0
dry_mass_g = 125.0
gs = 2.65
[stage_defaults.columns]
time = { column = "t (s)", unit = "s" }
horizontal_displacement = { column = "x (mm)", unit = "mm" }
vertical_displacement = { column = "gauge (mm)", unit = "mm", dilation = "negative" }
shear_force = { column = "F (N)", unit = "N" }
"""


def tanh_ratio(u: np.ndarray) -> np.ndarray:
    return 0.6 * np.tanh(u / 0.5)  # test's own curve: tau/sigma -> 0.6, no dilation


def dilating_ratio(u: np.ndarray) -> np.ndarray:
    # Taylor's energy correction (REFERENCES sec. 5): tau/sigma = mu + dy/dx, mobilised over ~0.2 mm
    return MU * np.tanh(u / 0.2) + A * (u / UP) * np.exp(1.0 - u / UP)


def dilating_y(u: np.ndarray) -> np.ndarray:
    # computed: the integral of dy/du = A (u/UP) exp(1 - u/UP), zero at u = 0
    return A * math.e * UP * (1.0 - (1.0 + u / UP) * np.exp(-u / UP))


def _synthetic(root: Path, stages: dict[str, float], ratio: Callable[[np.ndarray], np.ndarray],
               y: Callable[[np.ndarray], np.ndarray] | None = None) -> Path:
    """Write a project whose stages follow ``ratio`` (of u = x - SLACK) at the given normal forces (N)."""
    (root / "readings").mkdir(parents=True)
    x = np.round(np.arange(0.0, SLACK + TRAVEL + STEP / 2, STEP), 6)
    u = np.clip(x - SLACK, 0.0, None)
    gauge = -(y(u) if y is not None else np.zeros_like(u))  # the gauge reads down on dilation
    toml = [TOML]
    for sid, force_n in stages.items():
        force = force_n * ratio(u)
        rows = [f"{600.0 * xi:.3f},{xi:.6f},{gi:.7f},{fi:.6f}" for xi, gi, fi in zip(x, gauge, force, strict=True)]
        (root / "readings" / f"{sid}.csv").write_text("t (s),x (mm),gauge (mm),F (N)\n" + "\n".join(rows) + "\n")
        toml.append(f'[[stage]]\nid = "{sid}"\nfile = "readings/{sid}.csv"\ntest_set = "synthetic"\n'
                    f"[stage.normal_load]\nforce_n = {force_n}\n")
    (root / "project.toml").write_text("\n".join(toml), encoding="utf-8")
    return root


def test_synthetic_critical_state_and_no_distinct_peak(tmp_path: Path) -> None:
    root = _synthetic(tmp_path / "p", {"S50": 180.0, "S100": 360.0, "S200": 720.0}, tanh_ratio)
    results = interpret(root)
    for stage in results.stages:
        assert stage.critical_state.chosen.ratio == pytest.approx(0.6, rel=0.005)  # the curve's own limit, tanh -> 1
        assert stage.critical_state.chosen.flags == ()  # steady ratio and no dilation: critical state reached
        assert stage.no_distinct_peak is not None and stage.no_distinct_peak.startswith("no distinct peak")
    env = results.envelope("synthetic", "critical_state")
    assert env.origin is not None and env.free is not None
    assert env.origin.phi_deg == pytest.approx(math.degrees(math.atan(0.6)), rel=0.005)  # computed, 30.96 deg
    assert abs(env.free.intercept) < 0.5  # kPa; computed: the curves pass through the origin
    assert results.envelope("synthetic", "peak").stage_ids == ()


def test_synthetic_seating_shift(tmp_path: Path) -> None:
    results = interpret(_synthetic(tmp_path / "p", {"S100": 360.0}, tanh_ratio))
    reduced = results.stage("S100").reduced
    # computed: the closed form starts at x = SLACK and is linear there (tanh u ~ u)
    assert reduced.seating_shift_mm == pytest.approx(SLACK, abs=0.01)
    assert reduced.seating_shift_mm > 0
    assert results.to_dict()["stages"][0]["seating_shift_mm"] == reduced.seating_shift_mm  # recorded
    curve = reduced.curve
    before = curve["x_raw_mm"] < reduced.seating_shift_mm
    assert before.sum() > 10 and not curve.loc[before, "in_shear"].any()  # computed: SLACK/STEP = 60 slack rows
    assert curve.loc[curve["x_raw_mm"] > SLACK + 0.05, "in_shear"].all()
    np.testing.assert_allclose(curve["x_mm"], curve["x_raw_mm"] - reduced.seating_shift_mm)


def test_synthetic_dilating_peak(tmp_path: Path) -> None:
    results = interpret(_synthetic(tmp_path / "p", {"S100": 360.0}, dilating_ratio, dilating_y))
    stage = results.stage("S100")
    # analytic maximum of the test's formula: tau(u) = 1000 N r(u) / (L (L - u)), corrected area
    # (REFERENCES sec. 3), located by scipy.optimize on the closed form
    def neg_tau(u: float) -> float:
        return -1000.0 * 360.0 * float(dilating_ratio(np.array(u))) / (SIDE * (SIDE - u))

    best = minimize_scalar(neg_tau, bounds=(0.3, 6.0), method="bounded", options={"xatol": 1e-8})
    assert stage.no_distinct_peak is None and stage.peak.source == "suggested"
    assert stage.peak.chosen.x_mm == pytest.approx(best.x, rel=0.01)
    assert stage.peak.chosen.tau_kpa == pytest.approx(-best.fun, rel=0.01)
    assert stage.peak.chosen.tau_raw_kpa == pytest.approx(-best.fun, rel=0.01)
    # REFERENCES sec. 5: the peak comes with the maximum rate of dilation; computed: the closed-form
    # dy/du at the analytic peak (A at u = UP; the shrinking area moves the tau peak a little later)
    assert stage.peak.chosen.dydx == pytest.approx(A * (best.x / UP) * math.exp(1.0 - best.x / UP), rel=0.02)
    # dilation reaches the gauge with the right sign: y grows to A e UP (computed limit)
    assert stage.reduced.curve["y_mm"].iloc[-1] == pytest.approx(float(dilating_y(np.array(TRAVEL))), rel=1e-4)


def test_interpretation_file_in_the_project_is_used(tmp_path: Path) -> None:
    root = _synthetic(tmp_path / "p", {"S50": 180.0, "S100": 360.0, "S200": 720.0}, tanh_ratio)
    decision = StageDecision(included=False, exclusion_reason="test")
    save_interpretation(Interpretation().with_decision("S100", decision), root / "interpretation.json")
    results = interpret(root)
    assert results.envelope("synthetic", "critical_state").stage_ids == ("S50", "S200")
    assert not results.stage("S100").included
