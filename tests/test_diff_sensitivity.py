"""Interpretation edits, the diff of two interpretations, leave-one-out sensitivity, the text summary."""

from __future__ import annotations

import math
from pathlib import Path

import pytest
from scipy import stats
from synthetic import reversal_readings, write_project

from kernels_helpers import interpret, load_project, save_interpretation
from kernels_helpers.cli import main
from kernels_helpers.diff import diff_interpretations
from kernels_helpers.interpretation import Interpretation
from kernels_helpers.sensitivity import leave_one_out

AUTHOR = "T. Checker"


@pytest.fixture
def base(example_copy: Path) -> Interpretation:
    return Interpretation()


def test_edits_record_author_time_and_keep_the_suggestion(example_copy: Path, base: Interpretation) -> None:
    i = base.with_peak("BH03-D1", 1.5, AUTHOR, "first crest")
    d = i.decision("BH03-D1")
    assert (d.peak.source, d.peak.author, d.peak.note) == ("manual", AUTHOR, "first crest")
    assert d.peak.time_utc.endswith("Z") and len(d.peak.time_utc) == 20
    s = interpret(example_copy, i).stage("BH03-D1")
    assert abs(s.peak.chosen.x_mm - 1.5) < 0.01  # snapped to the nearest reading
    assert s.peak.suggested.x_mm != s.peak.chosen.x_mm  # the suggestion kept beside it
    back = i.back_to_suggestion("BH03-D1", "peak")
    assert interpret(example_copy, back).stage("BH03-D1").peak.chosen == s.peak.suggested
    with pytest.raises(ValueError, match="only be excluded with a stated reason"):
        base.excluded("BH03-D1", "  ", AUTHOR)


def test_signoff_goes_draft_checked_approved(base: Interpretation) -> None:
    i = base.with_signoff("checked", "C. Checker").with_signoff("approved", "A. Approver")
    assert i.signoff.state == "approved" and [h["who"] for h in i.signoff.history] == ["C. Checker", "A. Approver"]
    with pytest.raises(ValueError, match="cannot go from draft to approved"):
        base.with_signoff("approved", "A. Approver")
    assert i.with_signoff("draft", "E. Engineer").signoff.state == "draft"


def test_diff_in_words(example_copy: Path, base: Interpretation) -> None:
    project = load_project(example_copy)
    after = base.with_peak("BH03-D3", 2.0, AUTHOR, "earlier crest").excluded("BH03-D1", "disturbed in trimming", AUTHOR)
    report = diff_interpretations(project, base, after)
    ra, rb = interpret(project, base), interpret(project, after)
    pa, pb = ra.stage("BH03-D3").peak.chosen, rb.stage("BH03-D3").peak.chosen
    assert (f"BH03-D3: peak suggested at x = {pa.x_mm:.2f} mm (tau {pa.tau_kpa:.1f} kPa) "
            f"-> manual at x = {pb.x_mm:.2f} mm "
            f"(tau {pb.tau_kpa:.1f} kPa): moved {pb.x_mm - pa.x_mm:+.2f} mm, tau {pb.tau_kpa - pa.tau_kpa:+.1f} kPa; "
            "note: earlier crest") in report.stages
    assert "BH03-D1: excluded (disturbed in trimming)" in report.stages
    fa, fb = ra.envelope("BH03 dense", "peak").chosen, rb.envelope("BH03 dense", "peak").chosen
    line = next(x for x in report.envelopes if x.startswith("BH03 dense, peak:"))
    assert (f"phi' {fa.phi_deg:.2f} -> {fb.phi_deg:.2f} deg" in line and "stages 3 -> 2" in line
            and "(fit c' free -> c' = 0)" in line)
    assert diff_interpretations(project, after, after).empty
    restored = diff_interpretations(project, after, after.restored("BH03-D1", AUTHOR))
    assert "BH03-D1: restored to the envelopes" in restored.stages


def test_diff_command(example_copy: Path, base: Interpretation, tmp_path: Path,
                      capsys: pytest.CaptureFixture[str]) -> None:
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    save_interpretation(base, a)
    save_interpretation(base.with_signoff("checked", "C. Checker"), b)
    assert main(["diff", str(example_copy), str(a), str(b)]) == 0
    out = capsys.readouterr().out
    assert out.startswith(f"Changes from {a} to {b}:") and "draft -> checked by C. Checker at " in out
    assert main(["diff", str(example_copy), str(a), str(tmp_path / "missing.json")]) == 2
    assert "missing.json: interpretation file not found." in capsys.readouterr().err


def test_leave_one_out_matches_independent_fits(example_copy: Path) -> None:
    results = interpret(example_copy, Interpretation())
    env = results.envelope("stratum B (all sets)", "critical_state")  # six points: LOO keeps 5
    rows = leave_one_out(env)
    assert [r.left_out for r in rows] == list(env.stage_ids)
    for i, r in enumerate(rows):
        sigma = [s for j, s in enumerate(env.sigma_kpa) if j != i]
        tau = [t for j, t in enumerate(env.tau_kpa) if j != i]
        ref = stats.linregress(sigma, tau)  # scipy as the reference least-squares fit
        assert r.phi_deg == pytest.approx(math.degrees(math.atan(ref.slope)), rel=1e-10)
        assert r.c_kpa == pytest.approx(ref.intercept, abs=1e-9)
        assert r.phi_change_deg == pytest.approx(r.phi_deg - env.free.phi_deg, abs=1e-12)
        slope0 = sum(s * t for s, t in zip(sigma, tau, strict=True)) / sum(s * s for s in sigma)  # b = sum(xy)/sum(x^2)
        assert r.phi_origin_deg == pytest.approx(math.degrees(math.atan(slope0)), rel=1e-12)


def test_leave_one_out_of_three_is_the_exact_two_point_line(example_copy: Path) -> None:
    env = interpret(example_copy, Interpretation()).envelope("BH03 dense", "peak")
    row = leave_one_out(env)[0]
    (s1, s2), (t1, t2) = env.sigma_kpa[1:], env.tau_kpa[1:]
    assert row.method.startswith("exact line through the 2 remaining points")
    assert row.phi_deg == pytest.approx(math.degrees(math.atan((t2 - t1) / (s2 - s1))), rel=1e-12)
    assert row.c_kpa == pytest.approx(t1 - (t2 - t1) / (s2 - s1) * s1, rel=1e-12)


def test_summary_command_shows_manual_pick_beside_suggestion_and_exclusion(capsys: pytest.CaptureFixture[str]) -> None:
    example = Path(__file__).resolve().parent.parent / "example_project"  # ships one manual pick, one exclusion
    assert main(["summary", str(example)]) == 0
    out = capsys.readouterr().out
    assert ("BH03-D2 (BH03 dense), sigma'n 100 kPa" in out and "peak (manual): x 2.05 mm" in out
            and "[suggested x " in out)
    assert "BH03-L2 (BH03 loose), sigma'n 100 kPa - EXCLUDED: Laboratory remark" in out
    assert "Caution:" in out


def test_a_changed_consolidation_file_marks_its_stage_stale(example_copy: Path) -> None:
    # common practice: decisions stand against the exact raw files they were made on (SHA-256)
    cons = example_copy / "readings" / "BH03-D1-consolidation.csv"
    before = interpret(example_copy).stage("BH03-D1")
    assert not before.stale
    lines = cons.read_text(encoding="utf-8").split("\n")
    lines[-2] = lines[-2] + "1"  # one digit more on the last reading
    cons.write_text("\n".join(lines), encoding="utf-8")
    after = interpret(example_copy).stage("BH03-D1")
    assert after.stale
    assert any(f.startswith("raw file readings/BH03-D1-consolidation.csv (consolidation stage) changed since the "
                            "interpretation was saved") for f in after.flags), after.flags
    assert not interpret(example_copy).stage("BH03-D2").stale


def test_diff_reports_changed_design_choices_and_their_effect(example_copy: Path, base: Interpretation) -> None:
    project = load_project(example_copy)
    after = base.with_design(AUTHOR, limit_state="local", partial_factors="M1", gamma_phi=1.0, gamma_c=1.0)
    report = diff_interpretations(project, base, after)
    assert "limit_state: 'large zone' -> 'local'" in report.design and "partial_factors: 'M2' -> 'M1'" in report.design
    assert f"choices changed by {AUTHOR} at {after.design.time_utc}" in report.design
    da, db = interpret(project, base).design, interpret(project, after).design
    assert f"phi'_k {da.phi_k_deg:.2f} -> {db.phi_k_deg:.2f} deg" in next(
        x for x in report.design if x.startswith("phi'_k"))
    a0, b0 = da.design[0], db.design[0]  # the chosen set: M2 before, M1 after
    line = next(x for x in report.design if x.startswith("design values"))
    assert (line.startswith("design values (M2 -> M1): ")
            and f"phi'_d {a0.phi_d_deg:.2f} -> {b0.phi_d_deg:.2f} deg" in line)
    assert "Characteristic and design values:" in report.to_text()
    assert not report.stages and not report.envelopes  # the picks and fits did not move
    assert diff_interpretations(project, after, after).empty


def test_diff_reports_a_manual_residual(tmp_path: Path) -> None:
    ratios = [0.62, 0.55, 0.48, 0.45, 0.42]  # forward passes 1, 3, 5 still falling: the rule says "not reached"
    folder = write_project(tmp_path / "p", {f"R{k}": (reversal_readings(ratios, n, k), n, "reversal")
                                            for k, n in enumerate((360.0, 720.0), start=1)})
    project = load_project(folder)
    before = Interpretation()
    after = before.with_residual("R1", 5, 6.0, 8.0, AUTHOR, "last pass, end of travel")
    report = diff_interpretations(project, before, after)
    s, r = (interpret(project, i).stage("R1").residual for i in (before, after))
    assert s is not None and r is not None
    s, r = s.chosen, r.chosen
    assert not s.reached and r.reached  # the rule's last forward pass, then the engineer's window
    assert (f"R1: residual suggested (tau {s.tau_kpa:.1f} kPa, not reached) -> manual (tau {r.tau_kpa:.1f} kPa); "
            "note: last pass, end of travel") in report.stages
    assert diff_interpretations(project, after, after.back_to_suggestion("R1", "residual")).stages == (
        f"R1: residual manual (tau {r.tau_kpa:.1f} kPa) -> suggested (tau {s.tau_kpa:.1f} kPa, not reached)",)
