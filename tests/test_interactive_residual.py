"""The residual pick of reversal tests in the live workbook, without a browser.

A small synthetic project (tests/synthetic.py): two reversal stages whose forward passes have not
settled (the rule says "not reached") and one single-stage test. Bokeh changes are delivered as
jupyter_bokeh delivers them (each callback twice, and the page echoing our own writes); every case
checks the interpretation file on disk, the results, and that repeating a change writes nothing.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from bokeh.core.serialization import Serializer
from synthetic import Model, readings, reversal_project, write_project

from kernels_helpers import interpret
from kernels_helpers.views.widgets import LiveWorkbook, StagePanel, live_workbook


@pytest.fixture
def folder(tmp_path: Path) -> Path:
    return reversal_project(tmp_path / "p")


@pytest.fixture
def wb(folder: Path) -> LiveWorkbook:
    return live_workbook(folder, author="T. Tester")


def _file(wb: LiveWorkbook) -> dict:
    return json.loads(wb.controller.path.read_text(encoding="utf-8"))


def _from_page(panel: StagePanel, data: dict[str, list[float]]) -> None:
    """Deliver a change of the residual window ends exactly as jupyter_bokeh receives it from the page."""
    source = panel.plots.residual
    assert source is not None
    bokeh_model = panel.wb.bokeh
    content = {"event": "jsevent", "kind": "ModelChanged", "model": {"id": source.id}, "attr": "data",
               "new": Serializer().encode(data)}
    bokeh_model._sync_model(bokeh_model, content, [])


def _pass_x(wb: LiveWorkbook, sid: str, pass_no: int) -> np.ndarray:
    c = wb.controller.stage(sid).reduced.curve
    return c[c["in_shear"].to_numpy() & (c["pass_no"].to_numpy() == pass_no)]["x_mm"].to_numpy()


def _matches_interpret(wb: LiveWorkbook) -> None:
    assert wb.controller.results.to_json() == interpret(wb.controller.project, wb.controller.path).to_json()


def test_only_reversal_stages_get_a_residual_pick(wb: LiveWorkbook) -> None:
    r1 = wb.select("R1")
    s = wb.controller.stage("R1")
    assert s.residual is not None and not s.residual.chosen.reached and s.residual.source == "suggested"
    pick = wb.controller.residual_pick("R1")
    assert pick is not None and pick[0] == 5  # the rule's pass: the last forward pass, not settled
    assert r1.residual_pass is not None and r1.residual_pass.options == (("pass 1", 1), ("pass 3", 3), ("pass 5", 5))
    assert (r1.residual_pass.value, r1.res_from.value, r1.res_to.value) == (5, round(pick[1], 3), round(pick[2], 3))
    assert r1.plots.residual is not None
    tau = s.residual.chosen.tau_kpa
    assert r1.plots.residual.data == {"x": [pick[1], pick[2]], "y": [tau, tau]}
    assert (r1.plots.residual_box.left, r1.plots.residual_box.right) == (pick[1], pick[2])
    assert f"residual {s.residual.chosen.tau_kpa:.1f} kPa" in r1.plots.residual_label.text
    assert "(upper bound), pass 5, suggested" in r1.plots.residual_label.text
    assert r1.plots.residual_label.x == pick[2]
    assert max(r1.plots.residual_curve.data["abs_tau"]) > 0  # |tau| of the pass, reverse passes being negative
    assert "(suggested)" in wb.stage_table.rows["R1"]["residual"].value
    assert "upper bound" in wb.stage_table.rows["R1"]["residual"].value
    assert r1.residual_box.layout.display == ""
    s1 = wb.select("S1")  # the same panel, now on a stage that is not a reversal test: no residual pick shown
    assert s1.residual_box.layout.display == "none" and s1.plots.residual.data == {"x": [], "y": []}
    assert s1.plots.residual_box.visible is False and s1.plots.residual_label.text == ""
    assert wb.stage_table.rows["S1"]["residual"].value == "&ndash;"
    assert not wb.controller.set_residual("S1", 1, 4.0, 6.0)
    assert "not a reversal test" in wb.controller.message
    assert not wb.controller.path.exists()  # opening and refusing wrote nothing


def test_residual_drag_twice_and_echo_save_once(wb: LiveWorkbook) -> None:
    panel = wb.select("R1")
    before = wb.controller.results.envelope("synthetic", "residual")
    assert before.chosen is None  # neither stage reached the residual
    _from_page(panel, {"x": [7.7, 5.95], "y": [40.0, 40.0]})  # ends may cross over; called twice
    saved = _file(wb)["stages"]["R1"]["residual"]
    x5 = _pass_x(wb, "R1", 5)
    assert saved["source"] == "manual" and saved["pass_no"] == 5 and saved["author"] == "T. Tester"
    assert saved["x_from_mm"] in x5 and saved["x_to_mm"] in x5  # snapped to readings of that pass
    assert abs(saved["x_from_mm"] - 5.95) < 0.02 and abs(saved["x_to_mm"] - 7.7) < 0.02
    s = wb.controller.stage("R1")
    assert s.residual is not None and s.residual.source == "manual" and s.residual.chosen.reached
    assert s.residual.suggested is not None and not s.residual.suggested.reached
    assert not any(f.startswith("residual not reached") for f in s.flags)
    assert panel.plots.residual.data == {"x": [saved["x_from_mm"], saved["x_to_mm"]],
                                          "y": [s.residual.chosen.tau_kpa, s.residual.chosen.tau_kpa]}
    assert (panel.res_from.value, panel.res_to.value) == (round(saved["x_from_mm"], 3), round(saved["x_to_mm"], 3))
    assert "(manual)" in wb.stage_table.rows["R1"]["residual"].value
    assert panel.plots.residual_label.text == f"residual {s.residual.chosen.tau_kpa:.1f} kPa, pass 5, manual"
    assert len(wb.controller.history) == 1
    text = wb.controller.path.read_text(encoding="utf-8")
    _from_page(panel, {"x": [7.7, 5.95], "y": [40.0, 40.0]})  # the same drop again
    _from_page(panel, dict(panel.plots.residual.data))  # the page echoing our snapped ends
    assert wb.controller.path.read_text(encoding="utf-8") == text and len(wb.controller.history) == 1
    _from_page(wb.select("R2"), {"x": [5.9, 7.8], "y": [90.0, 90.0]})
    after = wb.controller.results.envelope("synthetic", "residual")
    assert after.stage_ids == ("R1", "R2") and after.chosen is not None  # both picked: the envelope is fitted
    assert 'data-kind="residual"' in wb.parameters.value
    plot = wb.envelope_plot  # the live envelope plot draws it too
    assert plot.group == "synthetic"
    drawn = plot.sources["residual"]
    assert drawn["in"].data["stage"] == ["R1", "R2"] and drawn["in"].data["y"] == list(after.tau_kpa)
    fit = after.chosen
    assert drawn["line"].data["y"][-1] == fit.intercept + fit.slope * drawn["line"].data["x"][-1]
    _matches_interpret(wb)


def test_the_live_envelope_plot_has_a_residual_envelope_only_with_reversal_tests(wb: LiveWorkbook,
                                                                                tmp_path: Path) -> None:
    assert [k for k, _, _ in wb.envelope_plot.kinds] == ["peak", "critical_state", "residual"]
    plain = write_project(tmp_path / "plain", {f"S{k}": (readings(Model(normal_n=n, seed=k)), n, "single-stage")
                                               for k, n in enumerate((180.0, 360.0, 720.0), start=1)})
    other = live_workbook(plain, author="T. Tester")
    assert [k for k, _, _ in other.envelope_plot.kinds] == ["peak", "critical_state"]


def test_refused_residual_picks_leave_the_file_alone(wb: LiveWorkbook) -> None:
    panel = wb.select("R1")
    panel.res_from.value = 6.0  # a first, accepted pick
    text = wb.controller.path.read_text(encoding="utf-8")
    drawn = dict(panel.plots.residual.data)
    _from_page(panel, {"x": [6.5, 6.51], "y": [40.0, 40.0]})  # too narrow: a reading or two
    assert wb.controller.path.read_text(encoding="utf-8") == text
    assert "refused" in wb.status.value and "needs at least 5" in wb.status.value
    assert dict(panel.plots.residual.data) == drawn  # the ends went back to the pick in the file
    assert not wb.act(lambda c: c.set_residual("R1", 4, 6.0, 7.5), redraw="R1")  # a reverse pass
    assert "pass 4 is not a forward pass" in wb.status.value and "[1, 3, 5]" in wb.status.value
    assert wb.controller.path.read_text(encoding="utf-8") == text
    panel.res_to.value = 6.01  # the number twin refused the same way, and shows the file's value again
    assert "needs at least 5" in wb.status.value
    assert wb.controller.path.read_text(encoding="utf-8") == text
    assert panel.res_to.value == round(_file(wb)["stages"]["R1"]["residual"]["x_to_mm"], 3)
    assert len(wb.controller.history) == 1
    _matches_interpret(wb)


def test_number_twins_pass_choice_back_to_suggestion_and_undo(wb: LiveWorkbook) -> None:
    panel = wb.select("R1")
    assert panel.residual_pass is not None
    suggested = wb.controller.stage("R1").residual
    panel.res_from.value = 6.5
    saved = _file(wb)["stages"]["R1"]["residual"]
    assert saved["source"] == "manual" and saved["pass_no"] == 5 and abs(saved["x_from_mm"] - 6.5) < 0.02
    panel.residual_pass.value = 3  # the same window on an earlier forward pass: a higher residual
    saved = _file(wb)["stages"]["R1"]["residual"]
    assert saved["pass_no"] == 3 and saved["x_from_mm"] in _pass_x(wb, "R1", 3)
    s = wb.controller.stage("R1")
    assert suggested is not None and s.residual is not None and suggested.chosen.tau_kpa is not None
    assert s.residual.chosen.tau_kpa > suggested.chosen.tau_kpa * 1.05
    assert panel.plots.residual_pass == 3 and "pass 3, manual" in panel.plots.residual_label.text
    assert len(wb.controller.history) == 2  # writing the snapped values back did not count as edits
    panel.res_reset.click()
    panel.res_reset.click()  # twice: nothing more to do
    assert _file(wb)["stages"]["R1"]["residual"]["source"] == "suggested"
    assert len(wb.controller.history) == 3
    s = wb.controller.stage("R1")
    assert s.residual.source == "suggested" and s.residual == suggested
    assert panel.residual_pass.value == 5 and panel.plots.residual_pass == 5
    assert any(f.startswith("residual not reached") for f in s.flags)
    wb.undo.click()
    assert _file(wb)["stages"]["R1"]["residual"]["pass_no"] == 3 and panel.residual_pass.value == 3
    _matches_interpret(wb)


def test_the_drawn_suggestion_is_the_window_the_rule_averages(wb: LiveWorkbook) -> None:
    """Typing the suggested window as a manual pick gives the suggested value (to within one reading)."""
    for sid in ("R1", "R2"):
        pick = wb.controller.residual_pick(sid)
        before = wb.controller.stage(sid).residual
        assert pick is not None and before is not None and before.chosen.tau_kpa is not None
        assert wb.controller.set_residual(sid, *pick)
        after = wb.controller.stage(sid).residual
        assert after is not None and after.source == "manual"
        assert after.chosen.tau_kpa == pytest.approx(before.suggested.tau_kpa, rel=2e-3)


def test_reopening_restores_the_residual_pick(folder: Path) -> None:
    wb = live_workbook(folder, author="T. Tester")
    wb.select("R2").res_to.value = 7.0
    again = live_workbook(folder)
    assert again.controller.interpretation == wb.controller.interpretation
    a, b = again.select("R2"), wb.select("R2")
    assert a.plots.residual is not None and b.plots.residual is not None
    assert a.plots.residual.data == b.plots.residual.data
    assert (a.res_from.value, a.res_to.value) == (b.res_from.value, b.res_to.value)
    assert "(manual)" in again.stage_table.rows["R2"]["residual"].value
