"""The live workbook without a browser: widget values set and Bokeh changes delivered as jupyter_bokeh does.

jupyter_bokeh applies a change from the page to the Python document and then calls the callbacks
again (so each fires twice), and the page echoes back every change Python makes. Each case below
checks the interpretation file on disk and the results, and that repeating a change writes nothing.
"""

from __future__ import annotations

import hashlib
import html
import json
from pathlib import Path
from typing import TYPE_CHECKING

import pytest
from bokeh.core.serialization import Serializer

from kernels_helpers import interpret
from kernels_helpers.decisions import Cohesion
from kernels_helpers.pipeline import raw_file_hashes
from kernels_helpers.views.widgets import LiveWorkbook, live_workbook

if TYPE_CHECKING:
    from conftest import LiveRun

STAGE, OTHER = "BH03-D3", "BH03-L3"  # the example file leaves both as suggested and included


@pytest.fixture
def wb(example_copy: Path) -> LiveWorkbook:
    return live_workbook(example_copy, author="T. Tester")


def _file(wb: LiveWorkbook) -> dict:
    return json.loads(wb.controller.path.read_text(encoding="utf-8"))


def _from_page(wb: LiveWorkbook, source, data: dict[str, list[float]]) -> None:
    """Deliver a change of ``source.data`` exactly as jupyter_bokeh receives it from the page."""
    bokeh_model = wb.bokeh  # the live screen's one Bokeh document
    content = {"event": "jsevent", "kind": "ModelChanged", "model": {"id": source.id}, "attr": "data",
               "new": Serializer().encode(data)}
    bokeh_model._sync_model(bokeh_model, content, [])


def _matches_interpret(wb: LiveWorkbook) -> None:
    """The live results are what interpret() gives on the file as saved (one source of truth)."""
    assert wb.controller.results.to_json() == interpret(wb.controller.project, wb.controller.path).to_json()


def test_opening_restores_every_decision_and_writes_nothing(example_copy: Path) -> None:
    before = (example_copy / "interpretation.json").read_bytes()
    wb = live_workbook(example_copy)
    assert (example_copy / "interpretation.json").read_bytes() == before
    d2 = wb.controller.stage("BH03-D2")
    assert d2.peak.source == "manual" and wb.select("BH03-D2").plots.peak.data["x"] == [d2.peak.chosen.x_mm]
    assert wb.select("BH03-D2").peak_x.value == round(d2.peak.chosen.x_mm, 3)
    assert wb.stage_table.rows["BH03-L2"]["include"].value is False
    assert wb.stage_table.rows["BH03-L2"]["reason"].value == wb.controller.stage("BH03-L2").exclusion_reason
    assert wb.controller.results.to_json() == interpret(example_copy).to_json()


def test_edits_without_an_author_are_refused_visibly(example_copy: Path) -> None:
    wb = live_workbook(example_copy)
    before = wb.controller.path.read_bytes()
    panel = wb.select(STAGE)
    drawn = dict(panel.plots.peak.data)
    _from_page(wb, panel.plots.peak, {"x": [4.0], "y": [150.0]})
    assert wb.controller.path.read_bytes() == before
    assert "author" in wb.status.value
    assert dict(panel.plots.peak.data) == drawn  # the marker went back onto the current peak
    wb.cohesion.value = True
    assert wb.controller.path.read_bytes() == before and wb.cohesion.value is False
    wb.stage_table.rows[OTHER]["note"].value = "a note"
    assert wb.controller.path.read_bytes() == before and wb.stage_table.rows[OTHER]["note"].value == ""
    assert "author" in wb.stage_table.message.value


def test_peak_drag_twice_and_echo_save_once(wb: LiveWorkbook) -> None:
    panel = wb.select(STAGE)
    _from_page(wb, panel.plots.peak, {"x": [4.0], "y": [150.0]})  # jupyter_bokeh calls the callback twice
    saved = _file(wb)["stages"][STAGE]["peak"]
    s = wb.controller.stage(STAGE)
    assert saved["source"] == "manual" and saved["author"] == "T. Tester" and saved["time_utc"].endswith("Z")
    assert saved["x_mm"] == s.peak.chosen.x_mm and abs(s.peak.chosen.x_mm - 4.0) < 0.01  # snapped to a reading
    assert dict(panel.plots.peak.data) == {"x": [s.peak.chosen.x_mm], "y": [s.peak.chosen.tau_kpa]}  # on the curve
    assert panel.peak_x.value == round(s.peak.chosen.x_mm, 3)
    assert len(wb.controller.history) == 1
    text = wb.controller.path.read_text(encoding="utf-8")
    _from_page(wb, panel.plots.peak, {"x": [4.0], "y": [150.0]})  # the same drop again
    _from_page(wb, panel.plots.peak, dict(panel.plots.peak.data))  # the page echoing our snapped marker
    assert wb.controller.path.read_text(encoding="utf-8") == text and len(wb.controller.history) == 1
    assert set(_file(wb)["raw_files"]) == set(raw_file_hashes(wb.controller.project, wb.controller.readings))
    _matches_interpret(wb)


def test_window_drag_and_a_refused_window(wb: LiveWorkbook) -> None:
    panel = wb.select(STAGE)
    _from_page(wb, panel.plots.window, {"x": [10.5, 8.0], "y": [150.0, 150.0]})  # ends may cross over
    cs = _file(wb)["stages"][STAGE]["critical_state"]
    assert cs["source"] == "manual" and abs(cs["x_from_mm"] - 8.0) < 0.01 and abs(cs["x_to_mm"] - 10.5) < 0.01
    s = wb.controller.stage(STAGE)
    assert wb.select(STAGE).plots.window_strip.data["x0"] == [s.critical_state.chosen.x_from_mm]
    assert panel.cs_to.value == round(s.critical_state.chosen.x_to_mm, 3)
    text = wb.controller.path.read_text(encoding="utf-8")
    _from_page(wb, panel.plots.window, {"x": [9.0, 9.001], "y": [150.0, 150.0]})  # too few readings
    assert wb.controller.path.read_text(encoding="utf-8") == text
    assert "readings" in wb.status.value and "refused" in wb.status.value
    assert panel.plots.window.data["x"] == [s.critical_state.chosen.x_from_mm, s.critical_state.chosen.x_to_mm]
    _matches_interpret(wb)


def test_number_twins_and_back_to_suggestion(wb: LiveWorkbook) -> None:
    panel = wb.select(STAGE)
    panel.peak_x.value = 5.0
    assert abs(_file(wb)["stages"][STAGE]["peak"]["x_mm"] - 5.0) < 0.01
    panel.cs_from.value = 7.0
    assert abs(_file(wb)["stages"][STAGE]["critical_state"]["x_from_mm"] - 7.0) < 0.01
    assert len(wb.controller.history) == 2  # writing the snapped values back did not count as edits
    panel.peak_reset.click()
    panel.peak_reset.click()  # twice: nothing more to do
    assert _file(wb)["stages"][STAGE]["peak"]["source"] == "suggested"
    assert len(wb.controller.history) == 3
    assert panel.plots.peak.data["x"] == [wb.controller.stage(STAGE).peak.suggested.x_mm]
    panel.cs_reset.click()
    assert _file(wb)["stages"][STAGE]["critical_state"]["source"] == "suggested"
    _matches_interpret(wb)


def test_exclusion_needs_a_reason_and_greys_the_point(wb: LiveWorkbook) -> None:
    row = wb.stage_table.rows[OTHER]
    before = wb.controller.path.read_bytes()
    row["include"].value = False
    assert wb.controller.path.read_bytes() == before
    assert row["include"].value is True  # refused: the checkbox says what the file says
    assert "reason" in wb.stage_table.message.value
    row["reason"].value = "specimen disturbed on trimming"
    assert wb.controller.path.read_bytes() == before  # a reason alone changes nothing while included
    row["include"].value = False
    d = _file(wb)["stages"][OTHER]
    assert (d["included"] is False and d["exclusion_reason"] == "specimen disturbed on trimming"
            and d["author"] == "T. Tester")
    loose = wb.controller.results.envelope("BH03 loose", "critical_state")
    assert OTHER not in loose.stage_ids
    wb.select(OTHER)
    plot = wb.envelope_plot
    assert plot.group == "BH03 loose"
    assert OTHER in plot.sources["critical_state"]["out"].data["stage"]
    assert OTHER not in plot.sources["critical_state"]["in"].data["stage"]
    row["reason"].value = "specimen disturbed"  # a new reason for an excluded stage is saved
    assert _file(wb)["stages"][OTHER]["exclusion_reason"] == "specimen disturbed"
    row["include"].value = True
    assert _file(wb)["stages"][OTHER]["included"] is True
    row["note"].value = "checked the trimming log"
    assert _file(wb)["stages"][OTHER]["note"] == "checked the trimming log"
    _matches_interpret(wb)


def test_cohesion_toggle_parameters_and_summary(wb: LiveWorkbook) -> None:
    assert "sb-phi" in wb.parameters.value and "Caution" in wb.parameters.value
    wb.cohesion.value = True
    assert _file(wb)["settings"]["fit"]["cohesion"] == "zero"  # the file's spelling of the fit through the origin
    assert all(e.reported is Cohesion.ORIGIN for e in wb.controller.results.envelopes if e.chosen)
    assert "0 (fixed)" in wb.parameters.value
    fit = wb.controller.results.envelope("BH03 dense", "critical_state").chosen
    assert f'data-kind="critical_state">{fit.phi_deg:.1f}<' in wb.parameters.value
    assert "Sign-off:</b> draft" in wb.summary.value and "Open flags" in wb.summary.value
    wb.curved.value = True  # display only: nothing saved
    plot = wb.envelope_plot
    assert plot.group == "BH03 dense"
    assert len(plot.sources["peak"]["curve"].data["x"]) == 40
    assert len(wb.controller.history) == 1
    _matches_interpret(wb)


def test_undo_goes_back_one_change_at_a_time(wb: LiveWorkbook) -> None:
    original = wb.controller.interpretation
    wb.select(STAGE).peak_x.value = 5.0
    wb.stage_table.rows[OTHER]["reason"].value = "bad data"
    wb.stage_table.rows[OTHER]["include"].value = False
    wb.undo.click()
    f = _file(wb)
    assert f["stages"].get(OTHER, {}).get("included", True) is True and f["stages"][STAGE]["peak"]["source"] == "manual"
    assert wb.stage_table.rows[OTHER]["include"].value is True
    wb.undo.click()
    assert wb.controller.interpretation.decision(STAGE) == original.decision(STAGE)
    assert _file(wb)["stages"].get(STAGE, {}).get("peak", {}).get("source", "suggested") == "suggested"
    wb.undo.click()  # nothing left: refused, visibly
    assert "nothing to undo" in wb.status.value
    _matches_interpret(wb)


def test_reopening_finds_the_decisions(example_copy: Path) -> None:
    wb = live_workbook(example_copy, author="T. Tester")
    wb.select(STAGE).peak_x.value = 4.5
    wb.stage_table.rows[OTHER]["reason"].value = "bad data"
    wb.stage_table.rows[OTHER]["include"].value = False
    again = live_workbook(example_copy)
    assert again.controller.interpretation == wb.controller.interpretation
    assert again.select(STAGE).plots.peak.data == wb.select(STAGE).plots.peak.data
    assert again.stage_table.rows[OTHER]["include"].value is False


@pytest.mark.notebook
@pytest.mark.slow
def test_live_cells_run_headless_and_stay_out_of_the_record(example_live_run: LiveRun) -> None:
    import nbformat

    from kernels_helpers.record import LIVE_TAG, export_html

    nb = nbformat.read(example_live_run.notebook, as_version=4)  # the whole template, as JupyterLab runs it
    live = [c for c in nb.cells if LIVE_TAG in c.metadata.get("tags", [])]
    assert live and all(o.get("output_type") != "error" for c in live for o in c.get("outputs", []))
    assert any("application/vnd.jupyter.widget-view+json" in o.get("data", {})
               for c in live for o in c.get("outputs", []))
    html_text = export_html(nb, "audit")
    assert "live_workbook" not in html_text and "live-envelope" not in html_text and "widget-state" not in html_text
    # with a live screen open, the record cells wait to be asked (the kernel stays free for the drags)
    assert '"name":"envelope-BH03 dense"' not in json.dumps([c.get("outputs") for c in nb.cells])
    record_cells = [c for c in nb.cells if c.cell_type == "code" and c not in live and "views.show_" in c.source]
    assert record_cells and all(any("application/vnd.jupyter.widget-view+json" in o.get("data", {})
                                    for o in c.get("outputs", [])) for c in record_cells)  # a placeholder each
    # opening the live screen writes nothing: the file as the live screen left it, before the request cell edits it
    opened = "".join(o.get("text", "") for o in nb.cells[-1].outputs).splitlines()[0]
    assert opened == "opened on " + hashlib.sha256(example_live_run.interpretation_before).hexdigest()


@pytest.mark.notebook
@pytest.mark.slow
def test_the_record_part_is_computed_on_request_from_the_live_state(example_live_run: LiveRun) -> None:
    import nbformat

    run = nbformat.read(example_live_run.notebook, as_version=4)  # its last cell: conftest.LIVE_REQUEST
    printed = "".join(o.get("text", "") for o in run.cells[-1].outputs)
    assert "record part computed" in printed and "from revision 0 of the interpretation file" in printed
    assert "out of date: the record part below shows revision 0, the file is now at revision 1" in printed
    state = json.dumps(run.metadata["widgets"]["application/vnd.jupyter.widget-state+json"]["state"])
    for section in ("summary", "header", "stages", "statistics", "design", "signoff"):  # built into their places
        assert f'data-sb-section=\\"{section}\\"' in state, section
    assert "application/vnd.bokehjs_exec.v0+json" in state  # the figures too


def test_a_clash_with_another_writer_is_shown_and_reload_brings_the_file_in(wb: LiveWorkbook) -> None:
    from kernels_helpers.interpretation import load_interpretation
    from kernels_helpers.revisions import save_checked

    path = wb.controller.path
    other = load_interpretation(path)  # another workbook, or a script, on the same project
    save_checked(other.excluded(STAGE, "disturbed during trimming", "B. Checker"), path)
    on_disk = path.read_bytes()
    row = wb.stage_table.rows[STAGE]
    row["note"].value = "looks fine to me"  # the same stage: refused, and the edit stays on the screen
    assert path.read_bytes() == on_disk
    assert "not saved: " in wb.status.value and "stage BH03-D3 (by B. Checker at " in wb.status.value
    wb.reload.click()
    assert "reloaded interpretation.json (revision 1)" in wb.status.value and "sb-saved" not in wb.status.value
    assert ('your edit ("BH03-D3: note") was not saved: make it again if it still applies'
            in html.unescape(wb.status.value))
    assert not wb.controller.interpretation.decision(STAGE).included
    assert wb.stage_table.rows[STAGE]["include"].value is False  # the table shows the file as it is now
    _matches_interpret(wb)


def test_the_refit_is_drawn_before_the_save_and_taken_back_when_the_save_is_refused(wb: LiveWorkbook) -> None:
    """The plots of an edit go to the page while the file is written; a refused save draws the file's state again."""
    from kernels_helpers.interpretation import load_interpretation
    from kernels_helpers.revisions import save_checked

    path = wb.controller.path
    seen: list[tuple[bytes, float, str]] = []  # what the file held and the plot showed each time the plots were sent
    wb.bokeh.flush = lambda: seen.append((path.read_bytes(), wb.panel.plots.peak.data["x"][0],  # type: ignore
                                          wb.envelope_plot.labels["peak"].data["text"][0]))
    panel = wb.select(STAGE)
    before, label_before = path.read_bytes(), wb.envelope_plot.labels["peak"].data["text"][0]
    seen.clear()
    _from_page(wb, panel.plots.peak, {"x": [4.0], "y": [150.0]})
    moved = wb.controller.stage(STAGE).peak.chosen.x_mm
    assert abs(moved - 4.0) < 0.01
    assert seen[0][0] == before and seen[0][1] == moved  # drawn while the file still held the old pick
    assert seen[0][2] != label_before and seen[0][2] == wb.envelope_plot.labels["peak"].data["text"][0]
    assert _file(wb)["stages"][STAGE]["peak"]["source"] == "manual"  # and then saved
    _matches_interpret(wb)
    label_saved = wb.envelope_plot.labels["peak"].data["text"][0]

    other = load_interpretation(path)  # another writer decides the same stage meanwhile: our next save is refused
    save_checked(other.excluded(STAGE, "disturbed during trimming", "B. Checker"), path)
    on_disk, seen[:] = path.read_bytes(), []
    _from_page(wb, panel.plots.peak, {"x": [5.0], "y": [150.0]})
    assert path.read_bytes() == on_disk and "not saved: " in wb.status.value
    assert len(seen) >= 2 and abs(seen[0][1] - 5.0) < 0.01  # drawn first, then taken back
    assert panel.plots.peak.data["x"] == [moved] and wb.controller.stage(STAGE).peak.chosen.x_mm == moved
    assert seen[0][2] != label_saved  # the refused edit's refit was drawn ...
    assert seen[-1][1:] == (moved, label_saved) == (panel.plots.peak.data["x"][0],  # ... and taken back
                                                    wb.envelope_plot.labels["peak"].data["text"][0])


def test_a_drop_repaints_no_curve_and_sends_few_changes(wb: LiveWorkbook) -> None:
    """What keeps mouse-up to the refit fast in the page (tests/benchmarks/bench_live_refit.py): the picks and what
    marks them are on the overlay layer (moving them repaints no curve), and one drop is one small patch."""
    from bokeh.models import GlyphRenderer, LabelSet, Legend

    panel = wb.select(STAGE)
    tau = panel.plots.plots[0]
    moved = {panel.plots.peak, panel.plots.window, panel.plots.window_strip, panel.plots.peak_line,
             panel.plots.peak_label}
    for p in panel.plots.plots:
        for r in p.renderers:
            if isinstance(r, GlyphRenderer) and r.data_source in moved:
                assert r.level == "overlay", (p.name, r.glyph)
    assert all(a.level == "overlay" for a in tau.center if isinstance(a, LabelSet | Legend))
    sent: list[list] = []
    wb.bokeh._send_patch = lambda events: sent.append(events)  # type: ignore[method-assign]
    _from_page(wb, panel.plots.peak, {"x": [4.0], "y": [150.0]})
    assert len(sent) == 1 and 0 < len(sent[0]) <= 8, [(type(e.model).__name__, e.attr) for e in sent[0]]


def test_a_fault_in_drawing_before_the_save_does_not_cost_the_edit(example_copy: Path) -> None:
    from kernels_helpers.controller import Controller
    from kernels_helpers.interpretation import load_interpretation

    c = Controller(example_copy, author="T. Tester")

    def broken(results, changed) -> None:
        raise RuntimeError("drawing failed")
    c.show_before_save(broken)
    with pytest.raises(RuntimeError, match="drawing failed"):
        c.move_peak(STAGE, 4.0)
    assert load_interpretation(c.path).decision(STAGE).peak.source == "manual"  # saved all the same
    assert c.stage(STAGE).peak.source == "manual" and len(c.history) == 1  # and the screen's state is the file's
    assert c.results.to_json() == interpret(c.project, c.path).to_json()
