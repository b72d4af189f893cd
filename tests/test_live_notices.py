"""The live screen says what an edit changed in the fits, and carries the sign-off (same rules as the command).

The fit facts are checked against the results themselves (interpret on the file as saved): the
through-origin fallback when fewer than three stages are left (common practice: a straight line with
c' free needs at least three points for any statistics), and the sign of c'.
"""

from __future__ import annotations

from pathlib import Path

from kernels_helpers import interpret
from kernels_helpers.interpretation import load_interpretation
from kernels_helpers.notices import fit_changes, standing_notices
from kernels_helpers.views.widgets import live_workbook


def test_excluding_a_stage_says_the_fit_fell_back_to_c_zero_and_why(example_copy: Path) -> None:
    wb = live_workbook(example_copy, author="T. Tester")
    before = wb.controller.results
    assert wb.controller.exclude("BH03-D2", "disturbed on trimming (test)")
    after = wb.controller.results
    env = after.envelope("BH03 dense", "critical_state")
    assert env.reported == "zero" and before.envelope("BH03 dense", "critical_state").reported == "free"
    changes = fit_changes(before, after)
    assert any(c.startswith("BH03 dense, critical state: now c' = 0 (through the origin): ") for c in changes)
    assert "BH03 dense, peak: BH03-D2 left the fit (excluded: disturbed on trimming (test))" in changes
    assert wb.last_changes == changes  # the screen shows the same sentences
    assert "The last edit changed the fits" in wb.notices.value and "BH03-D2 left the fit" in wb.notices.value
    wb.act(lambda c: c.restore("BH03-D2"))
    assert any("now c' free" in c for c in wb.last_changes)


def test_standing_notices_name_negative_c_and_fits_not_made(example_copy: Path) -> None:
    res = interpret(example_copy)
    notes = standing_notices(res)
    for e in res.envelopes:
        if e.chosen is not None and e.chosen.negative_cohesion:
            assert any(n.startswith(f"{e.group}, {e.kind.replace('_', ' ')}: negative c'") for n in notes)
        if e.chosen is None:
            assert any(n.startswith(f"{e.group}, {e.kind.replace('_', ' ')}: not fitted") for n in notes)
    assert fit_changes(res, res) == []


def test_the_sign_off_is_recorded_on_the_live_screen_with_the_command_s_rules(example_copy: Path) -> None:
    wb = live_workbook(example_copy, author="")
    panel = wb.signoff
    assert list(panel.state.options) == ["checked"]  # from draft only to checked
    panel.record()
    assert "type your name in the author box first" in wb.status.value  # refused without a name
    wb.controller.author = "B. Checker"
    panel.note.value = "picks checked against the sheets"
    panel.record()
    saved = load_interpretation(example_copy / "interpretation.json").signoff
    assert saved.state == "checked" and saved.history[-1]["who"] == "B. Checker"
    assert saved.history[-1]["note"] == "picks checked against the sheets"
    assert list(panel.state.options) == ["approved", "draft"] and "checked, not yet approved" in panel.history.value
    assert "B. Checker" in panel.history.value and "unsigned (a name only)" in panel.history.value


def test_a_manual_pick_asks_for_its_reason_and_a_project_can_require_one(example_copy: Path) -> None:
    wb = live_workbook(example_copy, author="T. Tester")
    c = wb.controller
    x = c.stage("BH03-D3").peak.x_mm + 1.0
    assert wb.act(lambda c: c.move_peak("BH03-D3", x))
    assert "give its reason in the stage&#x27;s reason box" in wb.status.value  # prompted, not refused
    wb.select("BH03-D3").reason.value = "crest flat over 1 mm; the middle taken"
    saved = load_interpretation(example_copy / "interpretation.json").decision("BH03-D3").peak
    assert saved.source == "manual" and saved.note == "crest flat over 1 mm; the middle taken"
    # the project can make the reason a condition of the pick, as for an exclusion
    toml = example_copy / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8") + '\n[policy]\nmanual_pick_reason = "require"\n',
                    encoding="utf-8")
    strict = live_workbook(example_copy, author="T. Tester")
    before = (example_copy / "interpretation.json").read_bytes()
    assert not strict.act(lambda c: c.move_peak("BH03-D1", c.stage("BH03-D1").peak.x_mm + 1.0))
    assert "this project requires a reason for every manual pick" in strict.status.value
    assert (example_copy / "interpretation.json").read_bytes() == before
    strict.select("BH03-D1").reason.value = "second crest is the true peak (see sheet)"
    assert strict.act(lambda c: c.move_peak("BH03-D1", c.stage("BH03-D1").peak.x_mm + 1.0))
    assert load_interpretation(example_copy / "interpretation.json").decision("BH03-D1").peak.note == (
        "second crest is the true peak (see sheet)")


def test_picks_are_named_on_the_plot_and_envelope_points_by_their_stage(example_copy: Path) -> None:
    from bokeh.models import LabelSet

    wb = live_workbook(example_copy, author="T. Tester")
    plots = wb.select("BH03-D2").plots
    assert plots.peak_label.text == "manual peak"  # the example's interpretation moved BH03-D2's peak by hand
    assert wb.select("BH03-D1").plots.peak_label.text == "suggested peak"
    assert wb.select("BH03-L1").plots.peak_label.text == "no distinct peak"
    labels = [r for r in wb.envelope_plot.figure.center if isinstance(r, LabelSet)]
    assert labels and all(getattr(lab.text, "field", lab.text) == "stage" for lab in labels)
    wb.select("BH03-D1")
    assert "BH03-D1" in wb.envelope_plot.sources["peak"]["in"].data["stage"]


def test_a_flagged_reading_is_drawn_where_it_is_and_the_stage_lists_its_flags(example_copy: Path) -> None:
    raw = example_copy / "readings" / "BH03-D3.csv"
    lines = raw.read_text(encoding="utf-8").split("\n")
    cols = lines[2000].split(",")
    cols[-1] = f"{float(cols[-1]) * 1.5:.5f}"  # one shear load reading half as large again: an isolated spike
    lines[2000] = ",".join(cols)
    raw.write_text("\n".join(lines), encoding="utf-8")
    wb = live_workbook(example_copy, author="T. Tester")
    panel = wb.select("BH03-D3")
    s = wb.controller.stage("BH03-D3")
    spiked = s.reduced.curve[s.reduced.curve["spike"]]
    assert len(spiked) >= 1 and panel.plots.flagged.data["x"] == spiked["x_mm"].tolist()
    assert panel.plots.flagged.data["text"][0].startswith("isolated spike (Hampel filter)")
    assert f"{len(s.flags)} flag(s) on this stage" in panel.info.value
    assert all(f.split(":")[0] in panel.info.value for f in s.flags)  # listed in full, not folded
