"""The exported record in a real browser (Debian chromium), with every network request blocked."""

from __future__ import annotations

import io
from pathlib import Path

import pytest
from PIL import Image, ImageStat

from kernels_helpers.record import write_record

pytestmark = pytest.mark.browser


def _plot_png(page, name: str) -> bytes:
    box = page.evaluate(
        """name => { const v = Bokeh.index.query_one(v => v.model.name === name);
                     v.el.scrollIntoView(); const r = v.canvas_view.el.getBoundingClientRect();
                     return {x: r.x, y: r.y, width: r.width, height: r.height}; }""",
        name,
    )
    assert box["width"] > 100 and box["height"] > 100, f"plot {name} has no size: {box}"
    return page.screenshot(clip=box)


def test_record_renders_offline_with_plots(browser, example_copy: Path, artifacts: Path) -> None:
    record = write_record(example_copy, artifacts / "record-report.html").path
    outside: list[str] = []

    def block(route) -> None:
        url = route.request.url
        if url.startswith(("file:", "data:", "blob:")):
            route.continue_()
        else:
            outside.append(url)
            route.abort()

    page = browser.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.route("**/*", block)
    page.goto(record.as_uri())
    page.wait_for_function("() => window.Bokeh && Bokeh.index.query_one(v => v.model.name === 'envelope-BH03 dense')",
                           timeout=20000)
    page.wait_for_timeout(500)
    page.screenshot(path=str(artifacts / "record-report.png"), full_page=True)
    assert outside == [], f"the record tried to reach the network: {outside}"
    assert errors == []
    for name in ("envelope-BH03 dense", "stage-BH03-D1-tau"):
        png = _plot_png(page, name)
        (artifacts / f"record-{name.replace(' ', '_')}.png").write_bytes(png)
        img = Image.open(io.BytesIO(png)).convert("L")
        stat = ImageStat.Stat(img)
        colours = len(img.getcolors(maxcolors=1 << 16) or [])
        assert stat.stddev[0] > 10 and colours > 20, (
            f"plot {name} looks blank (sd {stat.stddev[0]:.1f}, {colours} greys)")
    page.close()


def test_escaped_note_does_not_run_in_the_browser(browser, example_copy: Path, artifacts: Path) -> None:
    from kernels_helpers import save_interpretation
    from kernels_helpers.interpretation import Interpretation, StageDecision

    note = "<script>alert(1)</script><img src=x onerror=alert(2)>"
    save_interpretation(Interpretation().with_decision("BH03-D3", StageDecision(note=note)),
                        example_copy / "interpretation.json")
    record = write_record(example_copy, artifacts / "record-escaped.html").path
    page = browser.new_page()
    dialogs: list[str] = []
    page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    page.route("**/*", lambda r: r.continue_() if r.request.url.startswith(("file:", "data:", "blob:")) else r.abort())
    page.goto(record.as_uri())
    page.wait_for_timeout(1500)
    assert dialogs == []
    assert note in page.inner_text("body")  # shown as typed
    page.close()
