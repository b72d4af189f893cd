"""The HTML record: headless execution of the template, offline export, escaping, refusal on error."""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import TYPE_CHECKING

import nbformat
import pytest
from conftest import kernels_of_this_process, live_processes

from kernels_helpers import interpret
from kernels_helpers.errors import InterpretationFileError, RecordError
from kernels_helpers.record import network_references, write_record
from kernels_helpers.resources import workbook_template

if TYPE_CHECKING:
    from conftest import ExampleRecord, HostileRecord, LiveRun

pytestmark = pytest.mark.notebook
EXAMPLE = Path(__file__).resolve().parent.parent / "example_project"  # the bundled project: a record must not change it


def _embedded(html_text: str, name: str) -> dict:
    m = re.search(rf'<script type="application/json" id="{name}">(.*?)</script>', html_text, re.S)
    assert m, f"record lacks the {name} block"
    return json.loads(m.group(1))


@pytest.fixture(scope="module")
def record(example_record: ExampleRecord) -> tuple[Path, str]:
    return example_record.path, example_record.path.read_text(encoding="utf-8")


@pytest.mark.slow
def test_template_executes_headless_without_error(example_live_run: LiveRun) -> None:
    nb = nbformat.read(example_live_run.notebook, as_version=4)  # every cell, the live screen too
    errors = [o for c in nb.cells for o in c.get("outputs", []) if o.get("output_type") == "error"]
    assert errors == []
    assert any("injected-parameters" in c.metadata.get("tags", []) for c in nb.cells)


def test_record_has_no_network_reference(record: tuple[Path, str]) -> None:
    _, text = record
    assert network_references(text) == []
    # belt and braces on the raw text: no script or stylesheet is loaded from an http(s) address
    assert not re.search(r"<script[^>]+src=[\"']?(https?:)?//", text)
    assert not re.search(r"<link[^>]+href=[\"']?(https?:)?//", text)
    assert "cdn.bokeh.org" not in text and "cdnjs.cloudflare.com" not in text


def test_network_references_finds_what_a_page_would_fetch() -> None:
    page = ('<script src="https://x.example/a.js"></script><link rel="stylesheet" href="//x.example/b.css">'
            '<style>@import "https://x.example/c.css"; .a{background:url(http://x.example/d.png)}</style>'
            '<img src="data:image/png;base64,AAAA"><script>var u = "https://not-fetched.example";</script>')
    assert network_references(page) == ["<script src=https://x.example/a.js>", "<link href=//x.example/b.css>",
                                        "css https://x.example/c.css", "css http://x.example/d.png"]


def test_record_shows_inputs_picks_envelopes_versions_and_time(record: tuple[Path, str]) -> None:
    _, text = record
    results = _embedded(text, "shearbook-results")
    assert results == json.loads(interpret(EXAMPLE).to_json())
    for stage in results["stages"]:
        assert stage["sha256"] in text
        assert f"{stage['critical_state']['chosen']['tau_kpa']:.1f}" in text
    for env in results["envelopes"]:
        if env["free"]:
            assert f"{env['free']['phi_deg']:.1f}" in text
    assert "version of bokeh" in text and "version of numpy" in text
    assert re.search(r"made \(UTC\)</td><td>\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ", text)
    for stage in results["stages"]:  # every stage panel and every envelope plot is in the page
        for quantity in ("tau", "y", "e"):
            assert f'"name":"stage-{stage["id"]}-{quantity}"' in text
    for group in {e["group"] for e in results["envelopes"]}:
        assert f'"name":"envelope-{group}"' in text


def test_record_shows_bands_curved_fit_and_design_values_with_cautions(record: tuple[Path, str]) -> None:
    _, text = record
    results = _embedded(text, "shearbook-results")
    for st in results["envelope_statistics"]:  # the bands of every fitted envelope, on its group's plot
        if st["bands"]:
            assert f'"name":"envelope-{st["group"]}"' in text
            assert f"{st['kind'].replace('_', ' ')}: 95 % confidence band of the mean line" in text
    for line in results["critical_state_lines"]:
        if line["group"].startswith("stratum "):
            assert f'"name":"csl-{line["group"]}"' in text
    d = results["design"]
    assert f"{d['phi_k_deg']:.1f}" in text and f"{d['design'][0]['phi_d_deg']:.1f}" in text
    assert "Caution: design values." in text and "National Annex" in text
    assert "lower one-sided 95 % bound of the mean line" in text  # the method is written out
    assert "EN 1997-1 Annex A Table A.4, recommended" in text


def test_user_text_is_escaped_in_the_record(hostile_record: HostileRecord) -> None:
    """Markup in a stage note, an exclusion reason and every other user field (the suite's hostile record)."""
    text = hostile_record.path.read_text(encoding="utf-8")
    assert "<script>alert(2)</script>" not in text and "<img src=x onerror" not in text
    assert "&lt;script&gt;alert(2)&lt;/script&gt;" in text
    assert network_references(text) == []


def test_record_does_not_touch_the_raw_readings(example_record: ExampleRecord) -> None:
    after = {p.name: p.read_bytes() for p in (example_record.project / "readings").iterdir()}
    assert example_record.path.is_file() and after == example_record.readings_before


def _kernels_in(folder: Path) -> list[int]:
    """Kernel processes still alive whose working folder is ``folder`` (a record's kernel runs in its project)."""
    return [p.pid for p in live_processes() if "ipykernel" in p.cmdline and p.cwd == folder.resolve()]


def test_a_bad_interpretation_file_stops_the_export_and_the_kernel(example_copy: Path, tmp_path: Path) -> None:
    # the kernel is started before the interpretation file is checked (record.py): it must not outlive the error
    (example_copy / "interpretation.json").write_text('{"schema": "shearbook.interpretation/1", "version": "x"',
                                                      encoding="utf-8")
    out = tmp_path / "never.html"
    with pytest.raises(InterpretationFileError, match=r"interpretation\.json"):
        write_record(example_copy, out)
    assert not out.exists()
    assert kernels_of_this_process() == []


@pytest.mark.slow
def test_the_kernel_is_stopped_after_the_command_s_record_and_after_a_failed_cell(example_record: ExampleRecord,
                                                                     example_copy: Path, tmp_path: Path) -> None:
    # the suite's record, made by the command in a process of its own, left no kernel running in its project (the
    # kernel's working folder), whether or not that process is still alive
    assert example_record.path.is_file() and _kernels_in(example_record.project) == []
    assert kernels_of_this_process() == []
    nb = nbformat.read(workbook_template(), as_version=4)
    nb.cells.insert(3, nbformat.v4.new_code_cell("raise RuntimeError('stage table is inconsistent')"))
    broken = tmp_path / "broken.ipynb"
    nbformat.write(nb, broken)
    out = tmp_path / "never.html"
    with pytest.raises(RecordError, match=r"broken\.ipynb: cell \d+ \(\"raise RuntimeError.*\) raised RuntimeError: "
                                          r"stage table is inconsistent\. No record was written"):
        write_record(example_copy, out, template=broken)  # a failed cell stops the export: no record
    assert not out.exists()
    assert kernels_of_this_process() == []


def test_the_record_opens_with_its_summary_and_no_notebook_instructions(record: tuple[Path, str]) -> None:
    _, text = record
    results = _embedded(text, "shearbook-results")
    body = text[text.index("<body"):]
    first = body.index('data-sb-section="summary"')
    assert first < body.index('data-sb-section="header"') < body.index('data-sb-section="stages"')
    assert "Run all cells" not in text and "Type your name first" not in text  # words for the notebook only
    summary = body[first: body.index('data-sb-section="header"')]
    import hashlib

    digest = hashlib.sha256(re.search(r'id="shearbook-results">(.*?)</script>', text, re.S).group(1)
                            .replace("\\u003c", "<").replace("\\u003e", ">").replace("\\u0026", "&")
                            .encode()).hexdigest()
    assert digest in summary  # the digest shown is the SHA-256 of the embedded results
    for env in results["envelopes"]:
        fit = env["origin"] if env["reported"] == "zero" else env["free"]
        if fit is None:
            continue
        lo, hi = fit["phi_interval_deg"]
        assert f"{fit['phi_deg']:.1f} [{lo:.1f}, {hi:.1f}]" in summary
    d = results["design"]
    assert f"phi'_k = {d['phi_k_deg']:.1f} deg" in summary and f"phi'_d = {d['design'][0]['phi_d_deg']:.1f}" in summary
    assert "Open flags on included stages: " in summary and "Sign-off:</b> DRAFT - not checked" in summary
    assert "National Annex" in summary  # the caution is on the first page
