"""The live screen says what an edit changed in the fits, and carries the sign-off (same rules as the command).

The fit facts are checked against the results themselves (interpret on the file as saved): the
through-origin fallback when fewer than three stages are left (common practice: a straight line with
c' free needs at least three points for any statistics), and the sign of c'.
"""

from __future__ import annotations

from pathlib import Path

from kernels_helpers import interpret
from kernels_helpers.decisions import Cohesion
from kernels_helpers.interpretation import load_interpretation
from kernels_helpers.notices import fit_changes, standing_notices
from kernels_helpers.views.widgets import live_workbook


def test_excluding_a_stage_says_the_fit_fell_back_to_c_zero_and_why(example_copy: Path) -> None:
    wb = live_workbook(example_copy, author="T. Tester")
    before = wb.controller.results
    assert wb.controller.exclude("BH03-D2", "disturbed on trimming (test)")
    after = wb.controller.results
    env = after.envelope("BH03 dense", "critical_state")
    assert env.reported is Cohesion.ORIGIN and before.envelope("BH03 dense", "critical_state").reported == "free"
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
    x = c.stage("BH03-D3").peak.chosen.x_mm + 1.0
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
    assert not strict.act(lambda c: c.move_peak("BH03-D1", c.stage("BH03-D1").peak.chosen.x_mm + 1.0))
    assert "this project requires a reason for every manual pick" in strict.status.value
    assert (example_copy / "interpretation.json").read_bytes() == before
    strict.select("BH03-D1").reason.value = "second crest is the true peak (see sheet)"
    assert strict.act(lambda c: c.move_peak("BH03-D1", c.stage("BH03-D1").peak.chosen.x_mm + 1.0))
    assert load_interpretation(example_copy / "interpretation.json").decision("BH03-D1").peak.note == (
        "second crest is the true peak (see sheet)")


def test_picks_are_named_on_the_plot_and_envelope_points_by_their_stage(example_copy: Path) -> None:
    from bokeh.models import LabelSet

    wb = live_workbook(example_copy, author="T. Tester")
    plots = wb.select("BH03-D2").plots
    assert plots.peak_label.data["text"] == ["manual peak"]  # the example's interpretation moved BH03-D2's peak by hand
    assert wb.select("BH03-D1").plots.peak_label.data["text"] == ["suggested peak"]
    assert wb.select("BH03-L1").plots.peak_label.data["text"] == ["no distinct peak"]
    labels = [r for r in wb.envelope_plot.figure.center
              if isinstance(r, LabelSet) and not (r.name or "").startswith("fit-")]  # the fits' words aside
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


def test_flags_are_placed_where_they_apply_on_the_curve(example_copy: Path) -> None:
    """Each flag producer's own words give its place: lines, a displacement range, a failure point."""
    import dataclasses

    from kernels_helpers.views.live_plots import flag_places

    wb = live_workbook(example_copy, author="T. Tester")
    s = wb.controller.stage("BH03-D3")
    rows = wb.controller.row_of_line("BH03-D3")
    places = {text.split(":")[0]: (lo, hi) for lo, hi, text in flag_places(s, rows)}
    x = s.reduced.curve["x_mm"].to_numpy()
    first = float(x[s.reduced.curve["in_shear"].to_numpy()][0])
    fast = next(f for f in s.flags if f.startswith("too fast"))
    lo, hi = places["too fast for drained conditions"]  # the shearing up to failure, as the flag says
    assert lo == first and abs(hi - float(fast.split(" mm (sheared")[0].rsplit(" ", 1)[1])) < 0.05
    lo, hi = places["void ratio at critical state 0.613 differs from 0.748 of BH03-L3 (BH03 loose) by 0.135"]
    cs = s.critical_state.chosen
    assert (lo, hi) == (cs.x_from_mm, cs.x_to_mm)  # a critical-state flag: its window
    line = 5 + 100  # line 105 of the file is row 100 (the first data row is on line 5)
    worded = dataclasses.replace(s, flags=(
        "transducer fault: the vertical gauge does not move: 0.1 um over 2.0 mm of shearing "
        f"(lines {line}-{line + 1000})",
        "normal load not constant: 51.0 N at line 205 against 50.0 N declared",
        "stick-slip near the peak over 2.10-2.60 mm",
        "3 isolated spike(s) in shear stress (Hampel filter) at line(s) 7, 9, 11: kept and shown",
        "specimen height 10 mm is below 12.5 mm"))
    got = flag_places(worded, rows)
    assert [t.split(":")[0] for _, _, t in got] == ["transducer fault", "normal load not constant",
                                                     "stick-slip near the peak over 2.10-2.60 mm"]
    (a, b, _), (c, d, _), (e, f, _) = got
    assert (a, b) == (x[100], x[1100])  # file lines to readings
    assert c < x[200] < d and d - c < 0.2  # one line: a narrow band around its reading
    assert (e, f) == (2.10, 2.60)
    assert rows(4) is None and rows(5) == 0  # the header line is no reading
    wb.select("BH03-D3")
    shaded = wb.panel.plots.places.data
    assert len(shaded["left"]) == 2 and all(t in s.flags for t in shaded["text"])


def test_the_screen_says_when_it_is_ready_and_an_edit_before_then_is_applied(example_copy: Path) -> None:
    from kernels_helpers.views.widgets import READY, STARTING

    wb = live_workbook(example_copy, author="T. Tester")
    assert "starting" in wb.ready_state.value and not wb.is_ready
    assert STARTING.split(":")[0] in wb.ready_state.value
    wb.select("BH03-D3").peak_x.value = 4.0  # before ready: applied and saved, never dropped
    assert load_interpretation(wb.controller.path).decision("BH03-D3").peak.source == "manual"
    wb.ready()
    assert wb.is_ready and READY.split(":")[0] in wb.ready_state.value and "sb-ready" in wb.ready_state.value
