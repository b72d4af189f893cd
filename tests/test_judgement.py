"""Judgement on awkward sets: what an experienced checker would say (rules in DEVELOPERS.md, "Judgement").

Synthetic curves from tests/synthetic.py (Taylor's stress-dilatancy model, REFERENCES sec. 5) with
a case where each rule fires and one where it must not.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from synthetic import Model, readings, write_project

from kernels_helpers import interpret
from kernels_helpers.interpretation import StageDecision
from kernels_helpers.reduce import height_of_solids_mm

EXAMPLE = Path(__file__).resolve().parents[1] / "example_project"


# --- 1. void ratio after consolidation ---------------------------------------------------------

def _undeclared(example_copy: Path) -> Path:
    toml = example_copy / "project.toml"
    lines = [ln for ln in toml.read_text(encoding="utf-8").splitlines()
             if not ln.startswith("consolidation_settlement_mm")]
    toml.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return example_copy


def test_without_a_declared_settlement_the_void_ratio_starts_from_the_end_of_consolidation(example_copy: Path) -> None:
    # ASTM D3080 and ISO 17892-10: the specimen is sheared from its consolidated state, so e at the start
    # of shearing uses H_0 less the settlement at the end of consolidation (common practice for the chain)
    results = interpret(_undeclared(example_copy))
    for s in results.stages:
        spec = next(p for p in results_project(example_copy).stages if p.id == s.stage_id)
        gauge = pd.read_csv(example_copy / spec.consolidation.relpath, header=2)["Vertical gauge (mm)"]
        settled = float(gauge.iloc[-1] - gauge.iloc[0])  # the gauge reads down on dilation: up on compression
        hs = height_of_solids_mm(spec.specimen)
        r = s.reduced
        assert r.settlement_source == "consolidation readings"
        assert r.settlement_mm == pytest.approx(settled, abs=1e-9)
        assert r.height_start_mm == pytest.approx(spec.specimen.height_mm - settled, abs=1e-9)
        assert r.e_start == pytest.approx((spec.specimen.height_mm - settled - hs) / hs, abs=1e-12)
        assert not any("consolidation_settlement_mm" in f for f in s.flags)  # nothing declared: nothing to disagree


def results_project(root: Path):
    from kernels_helpers.project import load_project

    return load_project(root)


def test_the_chain_is_in_the_results_and_the_declared_value_wins_with_a_flag_when_it_disagrees(
        example_copy: Path) -> None:
    toml = example_copy / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace("consolidation_settlement_mm = 0.046",
                                                              "consolidation_settlement_mm = 0.300"), encoding="utf-8")
    results = interpret(example_copy)
    d1 = next(s for s in results.to_dict()["stages"] if s["id"] == "BH03-D1")
    chain = d1["void_ratio_chain"]
    assert chain["settlement_source"] == "declared" and chain["settlement_mm"] == 0.3
    assert chain["height_start_mm"] == pytest.approx(chain["height_initial_mm"] - 0.3)
    assert chain["e_start"] == pytest.approx((chain["height_start_mm"] - chain["height_of_solids_mm"])
                                             / chain["height_of_solids_mm"])
    expected = ("consolidation stage (readings/BH03-D1-consolidation.csv): consolidation_settlement_mm 0.3 mm in the "
                "project file differs from the last consolidation reading")
    assert any(f.startswith(expected) for f in d1["flags"])


def test_no_consolidation_readings_and_none_declared_says_so(tmp_path: Path) -> None:
    m = Model(normal_n=360, seed=11)
    write_project(tmp_path / "p", {"S1": (readings(m), m.normal_n, "single-stage")})
    s = interpret(tmp_path / "p").stage("S1")
    assert s.reduced.settlement_source == "none" and s.reduced.settlement_mm == 0.0


# --- 2. records that stop early ----------------------------------------------------------------

@pytest.mark.parametrize("travel", [3.0, 3.4])
def test_a_record_stopping_a_short_way_past_a_clear_peak_keeps_its_peak(tmp_path: Path, travel: float) -> None:
    m = Model(normal_n=360, psi_max=10, u_peak=2.0, travel=travel, seed=5)
    write_project(tmp_path / "p", {"S1": (readings(m), m.normal_n, "single-stage")})
    s = interpret(tmp_path / "p").stage("S1")
    assert s.critical_state.suggested.x_from_mm <= s.peak.chosen.x_mm  # the end window reaches back over the peak
    assert s.no_distinct_peak is None
    assert s.peak.chosen.tau_kpa == pytest.approx(m.true_peak()[1], rel=0.01)
    assert any(f.startswith("critical state not reached: the record ends ") for f in s.flags), s.flags


def test_a_curve_still_rising_at_its_end_has_no_distinct_peak(tmp_path: Path) -> None:
    m = Model(normal_n=360, psi_max=0.0, contraction=0.08, u_mob=1.0, travel=2.5, seed=4)  # loose, stopped early
    write_project(tmp_path / "p", {"S1": (readings(m), m.normal_n, "single-stage")})
    s = interpret(tmp_path / "p").stage("S1")
    assert s.no_distinct_peak is not None and "falls by" in s.no_distinct_peak


def test_the_example_peaks_are_unchanged_by_the_early_stop_rule() -> None:
    # every example record runs well past its peak: the rule must not move a pick there
    for s in interpret(EXAMPLE).stages:
        assert not any(f.startswith("critical state not reached: the record ends") for f in s.flags)


def test_the_record_method_states_the_rules_and_where_the_settlement_came_from(example_copy: Path) -> None:
    from kernels_helpers.views.tables import method_html, specimen_table

    results = interpret(_undeclared(example_copy))
    text = method_html(results)
    assert "(here: end of the consolidation readings)" in text and "falls after it by that margin" in text
    assert "<td>end of the consolidation readings</td>" in specimen_table(results, results_project(example_copy))


# --- 4. outlier stages -------------------------------------------------------------------------

def _set(tmp_path: Path, scale_of_s3: float) -> Path:
    stages = {}
    for k, normal in enumerate((180.0, 360.0, 540.0, 720.0, 900.0), start=1):
        m = Model(normal_n=normal, psi_max=9, seed=20 + k)
        scale = scale_of_s3 if k == 3 else 1.0
        stages[f"S{k}"] = (readings(m, force_scale=np.full(len(readings(m)["x"]), scale)), normal, "single-stage")
    return write_project(tmp_path / "p", stages)


def test_a_stage_far_from_the_envelope_of_the_others_is_flagged_never_excluded(tmp_path: Path) -> None:
    results = interpret(_set(tmp_path, 1.35))
    s3 = results.stage("S3")
    flags = [f for f in s3.flags if f.startswith("outlier on the peak envelope of synthetic")]
    assert flags, s3.flags
    assert "externally studentised residual +" in flags[0] and "without it phi'" in flags[0]
    assert s3.included and "S3" in results.envelope("synthetic", "peak").stage_ids  # the engineer decides
    assert not any(f.startswith("outlier") for s in results.stages if s.stage_id != "S3" for f in s.flags)


def test_a_clean_set_has_no_outlier(tmp_path: Path) -> None:
    results = interpret(_set(tmp_path, 1.0))
    assert not any(f.startswith("outlier") for s in results.stages for f in s.flags)


@pytest.mark.parametrize("origin", [False, True])
def test_externally_studentised_residuals_match_statsmodels(origin: bool) -> None:
    sm = pytest.importorskip("statsmodels.api")
    from statsmodels.stats.outliers_influence import OLSInfluence

    from kernels_helpers.outliers import studentised_external

    rng = np.random.default_rng(3)
    x = np.array([50.0, 100.0, 150.0, 200.0, 250.0, 300.0])
    y = 5.0 + 0.7 * x + rng.normal(0, 4, x.size)
    y[2] += 25.0
    design = x[:, None] if origin else sm.add_constant(x)
    reference = OLSInfluence(sm.OLS(y, design).fit()).resid_studentized_external
    np.testing.assert_allclose(studentised_external(x, y, origin), reference, rtol=1e-10)


def test_the_flag_gives_the_prediction_interval_of_the_fit_without_the_stage_as_statsmodels_does(
        tmp_path: Path) -> None:
    sm = pytest.importorskip("statsmodels.api")
    from kernels_helpers.outliers import envelope_outliers

    results = interpret(_set(tmp_path, 1.35))
    env = results.envelope("synthetic", "peak")
    (o,) = [o for o in envelope_outliers(env, 0.95) if o.stage_id == "S3"]
    i = env.stage_ids.index("S3")
    keep = [j for j in range(len(env.stage_ids)) if j != i]
    x, y = np.array(env.sigma_kpa), np.array(env.tau_kpa)
    fit = sm.OLS(y[keep], sm.add_constant(x[keep])).fit()
    frame = fit.get_prediction(np.array([[1.0, x[i]]])).summary_frame(alpha=0.05)
    assert (o.lower_kpa, o.predicted_kpa, o.upper_kpa) == pytest.approx(
        (frame["obs_ci_lower"].iloc[0], frame["mean"].iloc[0], frame["obs_ci_upper"].iloc[0]), rel=1e-9)


# --- 3. critical state not reached ------------------------------------------------------------

def _with_one_unreached(tmp_path: Path) -> Path:
    stages = {}
    for k, normal in enumerate((180.0, 360.0, 540.0, 720.0), start=1):
        travel = 4.0 if k == 2 else 10.0  # S2 stops while still dilating
        m = Model(normal_n=normal, psi_max=9, u_peak=2.0, travel=travel, seed=40 + k)
        stages[f"S{k}"] = (readings(m), normal, "single-stage")
    return write_project(tmp_path / "p", stages)


def test_a_critical_state_not_reached_is_left_out_of_the_fit_with_the_reason_beside_it(tmp_path: Path) -> None:
    from kernels_helpers.summary import summary_text
    from kernels_helpers.views.tables import picks_table

    results = interpret(_with_one_unreached(tmp_path))
    s2 = results.stage("S2")
    assert s2.critical_state_left_out is not None and "still dilating" in s2.critical_state_left_out
    assert results.envelope("synthetic", "critical_state").stage_ids == ("S1", "S3", "S4")
    assert "S2" in results.envelope("synthetic", "peak").stage_ids  # its peak is good
    assert all("S2" not in line.stage_ids for line in results.critical_state_lines)
    assert "  critical state left out of the critical-state envelope and line (critical state not reached: still " \
           "dilating" in summary_text(results)
    assert "not reached: left out of the critical-state fit" in picks_table(results)
    stage = next(s for s in results.to_dict()["stages"] if s["id"] == "S2")
    assert stage["critical_state"]["left_out"].startswith("left out of the critical-state envelope and line")


def test_the_engineer_puts_it_back_with_a_reason_shown_in_the_diff(tmp_path: Path) -> None:
    from kernels_helpers.diff import diff_interpretations
    from kernels_helpers.interpretation import Interpretation

    root = _with_one_unreached(tmp_path)
    before = Interpretation()
    after = before.with_critical_state_used("S2", "the ratio is level within 1 % over the last 1.5 mm", "A. Engineer")
    assert after.decision("S2").author == "A. Engineer" and after.decision("S2").time_utc
    results = interpret(root, after)
    assert results.stage("S2").critical_state_left_out is None
    assert "S2" in results.envelope("synthetic", "critical_state").stage_ids
    text = diff_interpretations(results_project(root), before, after).to_text()
    assert 'S2: critical state not reached, put back in the critical-state fit: "the ratio is level within 1 %' in text
    with pytest.raises(ValueError, match="can only be put back in the fit with a stated reason"):
        StageDecision(critical_state_used=True)


def test_the_workbook_puts_a_critical_state_back_and_saves_who_and_why(tmp_path: Path) -> None:
    from kernels_helpers.controller import Controller
    from kernels_helpers.interpretation import load_interpretation

    live = Controller(_with_one_unreached(tmp_path), author="A. Engineer")
    assert live.stage("S2").critical_state_left_out is not None
    assert live.use_critical_state("S2", "level enough for this purpose")
    saved = load_interpretation(live.path).decision("S2")
    assert (saved.critical_state_used, saved.critical_state_reason, saved.author) == (
        True, "level enough for this purpose", "A. Engineer")
    assert "S2" in live.results.envelope("synthetic", "critical_state").stage_ids


def test_a_set_where_every_critical_state_is_reached_loses_no_stage(tmp_path: Path) -> None:
    stages = {f"S{k}": (readings(Model(normal_n=n, seed=60 + k)), n, "single-stage")
              for k, n in enumerate((180.0, 360.0, 720.0), start=1)}
    results = interpret(write_project(tmp_path / "p", stages))
    assert results.envelope("synthetic", "critical_state").stage_ids == ("S1", "S2", "S3")


# --- 5. transducer faults ----------------------------------------------------------------------

def _faulty(tmp_path: Path, change) -> object:
    m = Model(normal_n=360, seed=70)
    cols = readings(m)
    change(cols)
    write_project(tmp_path / "p", {"S1": (cols, m.normal_n, "single-stage")})
    return interpret(tmp_path / "p").stage("S1")


def test_a_stuck_vertical_gauge_is_flagged_and_what_depends_on_it_marked_unreliable(tmp_path: Path) -> None:
    s = _faulty(tmp_path, lambda c: c.__setitem__("y", np.full_like(c["y"], 0.125)))
    (flag,) = [f for f in s.flags if f.startswith("transducer fault: ")]
    assert flag.startswith("transducer fault: the vertical displacement channel is stuck: 1 value(s) over ")
    assert "unreliable: void ratio, rate of dilation" in flag
    assert "void ratio" in s.unreliable and "stress-dilatancy aids (Taylor, Bolton)" in s.unreliable


def test_a_vertical_gauge_that_jumps_and_stays_is_flagged_with_its_lines(tmp_path: Path) -> None:
    def jump(c: dict) -> None:
        half = len(c["y"]) // 2
        c["y"][half:] += 0.4  # a gauge knocked during the test: the reading steps and stays
    s = _faulty(tmp_path, jump)
    assert any(f.startswith("transducer fault: the vertical displacement channel jumps by +0.4")
               and "and stays there (no spike, no stick-slip)" in f for f in s.flags), s.flags


def test_a_horizontal_channel_stuck_part_way_is_flagged_or_refused_in_words(tmp_path: Path) -> None:
    from kernels_helpers.errors import ShearbookError

    def stuck(c: dict) -> None:
        n = len(c["x"])
        c["x"][n // 3:] = c["x"][n // 3]  # the displacement transducer stops reading a third of the way
    try:
        s = _faulty(tmp_path, stuck)
    except ShearbookError:
        return  # refused in words is acceptable: no numbers from a stuck displacement
    assert any(f.startswith("transducer fault:") for f in s.flags), s.flags


def test_clean_channels_raise_no_transducer_flag() -> None:
    assert not any(f.startswith("transducer fault") for s in interpret(EXAMPLE).stages for f in s.flags)
