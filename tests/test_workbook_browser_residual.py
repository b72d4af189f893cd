"""The residual window of a reversal test, dragged in JupyterLab in Debian chromium.

A synthetic project (tests/synthetic.py): two reversal stages whose forward passes have not settled
(the rule says "residual not reached") and one single-stage test. One end of R1's residual window is
dragged on the shear-stress plot; the test checks the interpretation file on disk, that the value
equals ``interpret()`` on that file, and that the page's envelope plot draws the new residual point.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING

import pytest
from conftest import wait_until
from synthetic import reversal_project
from test_workbook_browser import PLOT_BOX, choose_stage, drag_until_saved, open_and_run_all

from kernels_helpers import interpret
from kernels_helpers.views.figures import RESIDUAL

if TYPE_CHECKING:
    from conftest import LabServer

pytestmark = [pytest.mark.browser, pytest.mark.slow]

STAGE = "R1"
# the data of the envelope plot's residual points, as the page holds them
RESIDUAL_POINTS = """([name]) => { const v = Bokeh.index.query_one(v => v.model.name === name);
  const r = v && v.model.renderers.find(r => r.glyph.marker && r.glyph.marker.value === 'square'
                                             && r.data_source.data.stage && r.data_source.data.stage.length);
  return r ? [Array.from(r.data_source.data.stage), Array.from(r.data_source.data.y)] : null; }"""


@pytest.fixture
def project(tmp_path: Path) -> Path:
    return reversal_project(tmp_path / "p")


@pytest.fixture
def lab(lab_server: LabServer, project: Path) -> Iterator[str]:
    with lab_server.workbook(project) as url:
        yield url


def _residual(project: Path) -> dict:
    path = project / "interpretation.json"
    if not path.exists():
        return {}
    return json.loads(path.read_text(encoding="utf-8")).get("stages", {}).get(STAGE, {}).get("residual", {})


def test_drag_a_residual_window_end(browser, lab: str, project: Path, artifacts: Path) -> None:
    page = browser.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    try:
        name = "live-tau"
        open_and_run_all(page, lab)
        page.locator(".sb-author input").fill("R. Browser")
        page.locator(".sb-author input").press("Tab")
        choose_stage(page, STAGE)
        before = interpret(project).stage(STAGE)
        assert before.residual is not None and before.residual.source == "suggested"
        assert not before.residual.chosen.reached
        ends = page.evaluate(f"""() => {{ const v = Bokeh.index.query_one(v => v.model.name === '{name}');
            const r = v.model.renderers.find(r => r.glyph.marker && r.glyph.marker.value === 'square'
                                                 && r.data_source.data.x && r.data_source.data.x.length === 2
                                                 && r.glyph.fill_color.value === '{RESIDUAL}');
            return [Array.from(r.data_source.data.x), Array.from(r.data_source.data.y)]; }}""")
        (x_from, x_to), (y, _) = ends
        target = x_to - 1.2  # pull the far end of the window back along the pass
        envelope = "live-envelope"
        shown_before = page.evaluate(RESIDUAL_POINTS, [envelope])
        saved = drag_until_saved(page, name, x_to, y, target,
                                 lambda: _residual(project).get("author") == "R. Browser" and _residual(project),
                                 "dragged residual window in the interpretation file")
        assert saved["source"] == "manual" and saved["pass_no"] == 5 and saved["time_utc"].endswith("Z")
        assert abs(saved["x_from_mm"] - x_from) < 0.05, saved  # the other end stayed
        assert abs(saved["x_to_mm"] - target) < 0.1, saved  # snapped to a reading near the drop
        after = interpret(project).stage(STAGE)
        assert after.residual is not None and after.residual.source == "manual" and after.residual.chosen.reached
        assert after.residual.chosen.tau_kpa != before.residual.chosen.tau_kpa
        shown = wait_until(lambda: (p := page.evaluate(RESIDUAL_POINTS, [envelope])) != shown_before and p, 20,
                      "the page's envelope plot to draw the new residual point")
        assert STAGE in shown[0]
        assert shown[1][shown[0].index(STAGE)] == pytest.approx(after.residual.chosen.tau_kpa, rel=1e-12)
        panel = page.evaluate(PLOT_BOX, [name, 0, 0])
        page.screenshot(path=str(artifacts / "workbook-residual-drag.png"),
                        clip={"x": max(panel["left"] - 10, 0), "y": max(panel["top"] - 40, 0), "width": 1100,
                              "height": 560})
        assert [e for e in errors if "Bokeh" in e or "widget" in e.lower()] == []
    finally:
        page.close()
