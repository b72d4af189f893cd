"""The exported record in a real browser (Debian chromium), with every network request blocked."""

from __future__ import annotations

import io
import json
import os
import re
import shutil
from pathlib import Path
from typing import TYPE_CHECKING

import pytest
from PIL import Image, ImageStat
from synthetic import PAYLOAD

if TYPE_CHECKING:
    from conftest import ExampleRecord, HostileRecord

pytestmark = [pytest.mark.browser, pytest.mark.slow]


def _plot_png(page, name: str) -> bytes:
    box = page.evaluate(
        """name => { const v = Bokeh.index.query_one(v => v.model.name === name);
                     v.el.scrollIntoView(); const r = v.canvas_view.el.getBoundingClientRect();
                     return {x: r.x, y: r.y, width: r.width, height: r.height}; }""",
        name,
    )
    assert box["width"] > 100 and box["height"] > 100, f"plot {name} has no size: {box}"
    return page.screenshot(clip=box)


def test_record_renders_offline_with_plots(browser, example_record: ExampleRecord, artifacts: Path) -> None:
    record = Path(shutil.copy(example_record.path, artifacts / "record-report.html"))  # a record is one file
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


def test_markup_in_every_field_is_shown_as_text_and_runs_nothing(browser, hostile_record: HostileRecord,
                                                                 artifacts: Path) -> None:
    """OWASP XSS prevention rules 1, 2 and 3.1 (common practice): text in HTML, attributes and script JSON.

    One hostile record serves every field, the stage note among them (a script and an onerror image in it)."""
    from kernels_helpers.verify import verify_record

    project = hostile_record.project
    record = Path(shutil.copy(hostile_record.path, artifacts / "record-hostile.html"))
    text = record.read_text(encoding="utf-8")
    v = verify_record(record, project)  # the escaped text reads back as the same text
    assert v.ok and v.shown_compared > 1000, v.to_text()
    assert "<i data-evil" not in text and "<img src=x" not in text
    page = browser.new_page()
    dialogs: list[str] = []
    errors: list[str] = []
    requests: list[str] = []
    page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    page.on("pageerror", lambda e: errors.append(str(e)))

    def block(route) -> None:
        if route.request.url.startswith(("file:", "data:", "blob:")):
            route.continue_()
        else:
            requests.append(route.request.url)
            route.abort()

    page.route("**/*", block)
    page.goto(record.as_uri())
    page.wait_for_function("() => window.Bokeh && Bokeh.index.roots.length > 0", timeout=20000)
    page.wait_for_timeout(1500)
    page.screenshot(path=str(artifacts / "record-hostile.png"))
    assert dialogs == [] and errors == [] and requests == []
    assert page.evaluate("document.querySelectorAll('[data-evil], img, [onerror]').length") == 0
    body = page.inner_text("body")
    assert PAYLOAD.split("\u2028")[0] in body  # a note of script and markup is shown as typed (up to the U+2028)
    assert body.count("data-evil") >= 8  # shown literally: names, id, set, description, note, reason, sign-off
    # every Bokeh document of the file was embedded and drawn: none was cut short by a "</script>" in its data
    docs = text.count("const docs_json = ")
    assert docs > 10 and page.evaluate("Bokeh.documents.length") == docs
    assert page.evaluate("[...document.querySelectorAll('script[type=\"application/json\"]')]"
                         ".map(s => JSON.parse(s.textContent)).length") == 3
    results = page.evaluate("JSON.parse(document.getElementById('shearbook-results').textContent)")
    assert results["stages"][0]["id"] == "D1 " + PAYLOAD  # the same text after the JSON round trip
    page.close()


def _pdf_pages(pdf: Path) -> list[str]:
    import subprocess

    info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True, check=True).stdout
    n = int(re.search(r"^Pages:\s+(\d+)", info, re.M).group(1))
    return [subprocess.run(["pdftotext", "-layout", "-f", str(i), "-l", str(i), str(pdf), "-"], capture_output=True,
                           text=True, check=True).stdout for i in range(1, n + 1)]


@pytest.mark.parametrize("paper, size", [("a4", "595.92 x 842.88|594.96 x 841.92"), ("letter", "612 x 792")])
def test_record_pdf_has_the_numbers_digest_and_every_stage_on_paper(artifacts: Path, example_record: ExampleRecord,
                                                                   paper: str, size: str) -> None:
    """Printed with Debian chromium; read back with pdftotext (poppler-utils)."""
    if shutil.which("pdftotext") is None or example_record.pdf is None:  # in CI a missing tool fails, never skips
        if os.environ.get("CI"):
            pytest.fail("chromium or poppler-utils (pdftotext) is missing in CI: tests/run.sh installs them")
        pytest.skip("chromium or poppler-utils (pdftotext) not installed (tests/run.sh installs them)")
    import subprocess

    from kernels_helpers.record import write_pdf

    out = Path(shutil.copy(example_record.path, artifacts / f"record-{paper}.html"))
    if paper == "a4":  # the command: record and print in one (conftest.example_record: shearbook record --pdf)
        shutil.copy(example_record.pdf, out.with_suffix(".pdf"))
    else:  # the paper size is the print's alone: the same record, printed again
        write_pdf(out, out.with_suffix(".pdf"), paper)
    pdf = out.with_suffix(".pdf")
    pages = _pdf_pages(pdf)
    text = "\n".join(pages)
    rec = out.read_text(encoding="utf-8")
    results = json.loads(re.search(r'id="shearbook-results">(.*?)</script>', rec, re.S).group(1))
    digest = re.search(r"Record digest</b>.*?sb-mono\">([0-9a-f]{64})<", rec, re.S).group(1)
    n = len(pages)
    assert n > 10
    for i, page in enumerate(pages, start=1):  # the footer of every page: project, digest, page x of y
        assert f"page {i} of {n}" in page and f"record {digest[:16]}" in page, f"page {i}: {page[-300:]}"
    assert "Calculation record: Port Wendle example" in pages[0]  # the summary opens the record
    env = next(e for e in results["envelopes"] if e["free"])
    assert f"{env['free']['phi_deg']:.1f} [" in pages[0]
    for s in results["stages"]:  # each stage starts a page, with its heading at the top
        starts = [p for p in pages if p.lstrip().startswith(f"Stage {s['id']},")]
        assert len(starts) == 1, f"stage {s['id']} does not start a page of its own"
        assert s["id"] in text
    info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True, check=True).stdout
    assert re.search(rf"Page size:\s+({size}) pts", info), info


def test_record_pdf_without_chromium_says_how_to_get_one(example_copy: Path, tmp_path: Path,
                                                         monkeypatch: pytest.MonkeyPatch) -> None:
    from kernels_helpers.errors import RecordError
    from kernels_helpers.record import write_pdf

    monkeypatch.setenv("SHEARBOOK_CHROMIUM", str(tmp_path / "no-chromium-here"))
    html = tmp_path / "r.html"
    html.write_text("<html><head></head><body>x</body></html>", encoding="utf-8")
    with pytest.raises(RecordError, match=r"--pdf needs Chromium or Google Chrome.*apt-get install chromium"):
        write_pdf(html, tmp_path / "r.pdf")
    assert not (tmp_path / "r.pdf").exists()
