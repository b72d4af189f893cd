"""The live workbook in a real browser: JupyterLab started here (conftest.lab_server), Debian chromium driven by
Playwright.

Opens the project's workbook on a copy of the example project, runs all cells, drags a peak marker,
excludes a stage with a reason in the table, and checks the interpretation file on disk and the
phi' shown in the page against ``interpret`` on that file.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import TYPE_CHECKING

import pytest
from conftest import wait_until

from kernels_helpers import interpret

if TYPE_CHECKING:
    from conftest import LabServer

pytestmark = [pytest.mark.browser, pytest.mark.slow]

STAGE, EXCLUDED, REASON = "BH03-D3", "BH03-L3", "specimen disturbed on trimming (browser test)"
@pytest.fixture
def lab(lab_server: LabServer, example_copy: Path) -> Iterator[str]:
    with lab_server.workbook(example_copy) as url:
        yield url


KERNEL_IDLE = """() => { const w = window.jupyterapp && window.jupyterapp.shell.currentWidget;
  const k = w && w.sessionContext && w.sessionContext.session && w.sessionContext.session.kernel;
  return !!k && k.status === 'idle' && !w.sessionContext.isBusy; }"""
PLOT_BOX = """([name, x, y]) => { const v = Bokeh.index.query_one(v => v.model.name === name);
  if (!v) return null; v.el.scrollIntoView({block: 'center'});
  const r = v.canvas_view.el.getBoundingClientRect();
  return {x: r.x + v.frame.x_scale.compute(x), y: r.y + v.frame.y_scale.compute(y),
          left: r.x, top: r.y, width: r.width, height: r.height}; }"""
SHOWN_PHI = """() => Array.from(document.querySelectorAll('.sb-parameters .sb-phi')).map(
  e => [e.dataset.group, e.dataset.kind, e.textContent])"""


def _file(project: Path) -> dict:
    path = project / "interpretation.json"
    return json.loads(path.read_text(encoding="utf-8")) if path.exists() else {}


def _shown_matches_file(page, project: Path) -> list[tuple[str, str, str]] | None:
    expected = sorted((e.group, e.kind, f"{e.chosen.phi_deg:.1f}") for e in interpret(project).envelopes if e.chosen)
    shown = sorted(tuple(x) for x in page.evaluate(SHOWN_PHI))
    return expected if shown == expected else None


def open_and_run_all(page, url: str, plot_name: str = "live-tau") -> None:
    """Open the workbook, run every cell, and wait until the live screen says it is ready (kernel idle)."""
    page.goto(url)
    page.wait_for_function(KERNEL_IDLE, timeout=90_000)
    page.evaluate("() => window.jupyterapp.commands.execute('notebook:run-all-cells')")
    page.wait_for_function(f"() => window.Bokeh && Bokeh.index.query_one(v => v.model.name === '{plot_name}')",
                           timeout=90_000)
    page.wait_for_selector(".sb-ready", timeout=90_000)
    page.wait_for_function(KERNEL_IDLE, timeout=90_000)


TAU_TITLE = "() => Bokeh.index.query_one(v => v.model.name === 'live-tau').model.title.text"
FIT_TITLES = ("() => Bokeh.index.query_one(v => v.model.name === 'live-envelope').model.center"
              ".filter(a => (a.name || '').startsWith('fit-')).map(a => a.source.data.text[0])")


def choose_stage(page, stage_id: str) -> None:
    """Interpret ``stage_id``: its button in the stage table, then wait until the curves are its own."""
    from kernels_helpers.escaping import dom_key

    page.locator(f".sb-show-{dom_key(stage_id)}").click()
    page.wait_for_function(f"() => ({TAU_TITLE})().startsWith({json.dumps(stage_id)})", timeout=20_000)
    page.wait_for_timeout(300)


def drag_until_saved(page, plot: str, x_from: float, y: float, x_to: float, saved: Callable[[], object],
                     what: str, tries: int = 3, halfway: Callable[[], None] | None = None) -> object:
    """Drag on ``plot`` from (x_from, y) to (x_to, y) in data units until ``saved()`` is true; return it.

    ``halfway`` runs with the mouse still down, half-way along (to look at the page mid-drag). A
    user whose drag did not take drags again, so do we (DEVELOPERS.md, live refit budget).
    """
    for _ in range(tries):
        page.evaluate(PLOT_BOX, [plot, x_from, y])  # scroll into view, then let the page settle
        page.wait_for_timeout(500)
        start = page.evaluate(PLOT_BOX, [plot, x_from, y])
        end = page.evaluate(PLOT_BOX, [plot, x_to, y])
        page.mouse.move(start["x"], start["y"])
        page.wait_for_timeout(200)
        page.mouse.down()
        page.mouse.move((start["x"] + end["x"]) / 2, start["y"], steps=6)
        if halfway is not None:
            halfway()
        page.mouse.move(end["x"], end["y"], steps=6)
        page.mouse.up()
        try:
            return wait_until(saved, 8, what)
        except AssertionError:
            continue
    raise AssertionError(f"{tries} drags on {plot} and still no {what}")


# Where the dragged curve and the envelope plot are, and what overflows its box inside the live screen.
LAYOUT = """() => {
  const box = e => { const r = e.getBoundingClientRect(); return {left: r.left, top: r.top, right: r.right,
                                                                  bottom: r.bottom}; };
  const screen = document.querySelector('.sb-screen');
  const plot = n => box(Bokeh.index.query_one(v => v.model.name === n).canvas_view.el);
  const over = [];
  const edge = box(screen).right;
  for (const e of screen.querySelectorAll('*')) {
    if (e.tagName === 'INPUT' || e.tagName === 'SELECT' || e.closest('.bk-Canvas')) continue;  // text scrolls in a box
    const r = e.getBoundingClientRect();
    if (r.width === 0) continue;
    const named = e.closest('[class*="sb-"]');  // the nearest Shearbook element names where it is
    const label = (e.className && e.className.toString ? e.className.toString() : e.tagName).slice(-60) + ' in '
                  + (named ? Array.from(named.classList).filter(c => c.startsWith('sb-')).join(' ') : '?');
    if (e.scrollWidth > e.clientWidth + 1 && getComputedStyle(e).overflowX !== 'visible') over.push(
      label + ': content ' + e.scrollWidth + ' px in ' + e.clientWidth + ' px');
    if (r.right > edge + 1) over.push(label + ': right edge ' + Math.round(r.right) + ' beyond ' + Math.round(edge));
  }
  return {tau: plot('live-tau'), envelope: plot('live-envelope'), over: over, width: innerWidth,
          height: innerHeight, screen: box(screen)};
}"""


def _check_one_screen(page, size: tuple[int, int]) -> None:
    """The dragged curve and the envelope plot both in the viewport; nothing cut off on the live screen."""
    page.evaluate("() => document.querySelector('.sb-screen').scrollIntoView({block: 'start'})")
    page.wait_for_timeout(600)
    at = page.evaluate(LAYOUT)
    for name in ("tau", "envelope"):
        b = at[name]
        assert b["left"] >= 0 and b["top"] >= 0 and b["right"] <= size[0] and b["bottom"] <= size[1], (size, name, b)
    assert at["over"] == [], (size, at["over"])


def test_one_screen_drag_previews_and_refits_at_1366_and_1920(browser, lab: str, example_copy: Path,
                                                              artifacts: Path) -> None:
    """At 1366 x 768 and 1920 x 1080: curve and envelope visible together, nothing cut off; a drag shows the
    browser's preview of the envelope and, on release, the kernel's refit; an exclusion is saved and refitted."""
    page = browser.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    try:
        page.set_viewport_size({"width": 1366, "height": 768})
        open_and_run_all(page, lab)
        _check_one_screen(page, (1366, 768))
        page.screenshot(path=str(artifacts / "workbook-1366-ready.png"))
        page.locator(".sb-author input").fill("B. Browser")
        page.locator(".sb-author input").press("Tab")
        choose_stage(page, STAGE)
        _check_one_screen(page, (1366, 768))
        before = interpret(example_copy).stage(STAGE)
        x_new = before.peak.chosen.x_mm + 1.5
        mid: dict[str, object] = {}

        def look_mid_drag() -> None:
            page.wait_for_timeout(150)
            mid["titles"] = page.evaluate(FIT_TITLES)
            page.screenshot(path=str(artifacts / "workbook-1366-mid-drag.png"))

        saved = drag_until_saved(
            page, "live-tau", before.peak.chosen.x_mm, before.peak.chosen.tau_kpa, x_new,
            lambda: _file(example_copy).get("stages", {}).get(STAGE, {}).get("peak", {}).get("author") == "B. Browser"
            and _file(example_copy), "dragged peak in the interpretation file", halfway=look_mid_drag)
        assert any(t.startswith("peak preview (browser, release to refit): phi' ") for t in mid["titles"]), mid
        peak = saved["stages"][STAGE]["peak"]
        assert peak["source"] == "manual" and peak["time_utc"].endswith("Z")
        assert abs(peak["x_mm"] - x_new) < 0.1, peak  # snapped to a reading near where it was dropped
        assert saved["raw_files"], "the raw-file hashes are saved with the decisions"
        fit = interpret(example_copy).envelope("BH03 dense", "peak").chosen
        refit = f"peak: phi' {fit.phi_deg:.1f} deg, c' {fit.intercept:.1f} kPa (n = {fit.n})"
        wait_until(lambda: refit in page.evaluate(FIT_TITLES), 10, "the kernel's refit in place of the preview")
        assert not any("preview" in t for t in page.evaluate(FIT_TITLES))
        page.screenshot(path=str(artifacts / "workbook-1366-after-drag.png"))

        page.set_viewport_size({"width": 1920, "height": 1080})
        page.wait_for_timeout(800)
        _check_one_screen(page, (1920, 1080))
        page.screenshot(path=str(artifacts / "workbook-1920-after-drag.png"))

        row = page.locator(f".sb-reason-{EXCLUDED} input")
        row.scroll_into_view_if_needed()
        row.fill(REASON)
        row.press("Enter")
        page.locator(f".sb-include-{EXCLUDED} input[type=checkbox]").click()
        saved = wait_until(lambda: _file(example_copy).get("stages", {}).get(EXCLUDED, {}).get("included") is False
                      and _file(example_copy), 20, "the exclusion in the interpretation file")
        assert saved["stages"][EXCLUDED]["exclusion_reason"] == REASON
        assert saved["stages"][STAGE]["peak"]["source"] == "manual"  # the drag is still there
        page.wait_for_timeout(300)
        page.screenshot(path=str(artifacts / "workbook-1920-table.png"))
        expected = wait_until(lambda: _shown_matches_file(page, example_copy), 20,
                              "the page's phi' to match interpret()")
        results = interpret(example_copy)
        assert EXCLUDED not in results.envelope("BH03 loose", "critical_state").stage_ids
        assert any(kind == "peak" for _, kind, _ in expected)
        page.locator(".sb-parameters").scroll_into_view_if_needed()
        page.wait_for_timeout(300)
        page.screenshot(path=str(artifacts / "workbook-1920-after-exclude.png"))
        _check_one_screen(page, (1920, 1080))
        assert [e for e in errors if "Bokeh" in e or "widget" in e.lower()] == []
    finally:
        page.close()


def test_markup_in_ids_and_names_neither_runs_nor_breaks_the_live_screen(browser, lab_server: LabServer,
                                                                        tmp_path: Path, artifacts: Path) -> None:
    """OWASP XSS rules (common practice): the live screen shows ids as text and keys its DOM by dom_key."""
    from synthetic import PAYLOAD, hostile_project

    from kernels_helpers.escaping import dom_key

    project = hostile_project(tmp_path)
    (project / "interpretation.json").unlink()  # a fresh start: only the ids and names carry the markup
    hostile = "D1 " + PAYLOAD
    with lab_server.workbook(project) as url:
        page = browser.new_page()
        dialogs: list[str] = []
        errors: list[str] = []
        page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
        page.on("pageerror", lambda e: errors.append(str(e)))
        try:
            open_and_run_all(page, url)
            choose_stage(page, hostile)  # its curves drawn, its id shown as text in the title
            assert page.evaluate("document.querySelectorAll('[data-evil], img[src=x], [onerror]').length") == 0
            assert dialogs == [], dialogs
            key = dom_key(hostile)
            assert key != hostile and all(c.isalnum() or c in "_-" for c in key)
            page.locator(".sb-author input").fill("B. Browser")
            page.locator(".sb-author input").press("Tab")
            reason = page.locator(f".sb-reason-{key} input")
            reason.scroll_into_view_if_needed()
            reason.fill("markup test: " + PAYLOAD)
            reason.press("Enter")
            page.locator(f".sb-include-{key} input[type=checkbox]").click()
            saved = wait_until(lambda: _file(project).get("stages", {}).get(hostile, {}).get("included") is False
                          and _file(project), 20, "the exclusion of the stage with markup in its id")
            assert saved["stages"][hostile]["exclusion_reason"] == "markup test: " + PAYLOAD
            page.wait_for_timeout(500)
            assert PAYLOAD.split("<img")[0] in page.inner_text("body")  # shown as typed
            assert page.evaluate("document.querySelectorAll('[data-evil], img[src=x], [onerror]').length") == 0
            page.screenshot(path=str(artifacts / "workbook-hostile.png"))
            assert dialogs == [] and [e for e in errors if "Bokeh" in e or "widget" in e.lower()] == []
        finally:
            page.close()
