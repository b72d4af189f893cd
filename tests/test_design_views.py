"""Views of the derived results without a browser: what the tables and figures carry, and escaping."""

from __future__ import annotations

from pathlib import Path

import pytest
from bokeh.models import GlyphRenderer, Legend, MultiLine, VArea

from kernels_helpers import Interpretation, interpret
from kernels_helpers.decisions import Cohesion
from kernels_helpers.design import DESIGN_CAUTION
from kernels_helpers.views import design_views
from kernels_helpers.views.figures import envelope_figure
from kernels_helpers.views.strength_figures import critical_state_figure
from kernels_helpers.views.tables import CAUTION, esc

EXAMPLE = Path(__file__).resolve().parents[1] / "example_project"
EVIL = "<script>alert(1)</script>"


@pytest.fixture(scope="module")
def results():
    interp = Interpretation().with_design(EVIL, note=EVIL, c_k_zero=True, c_k_zero_reason=EVIL)
    return interpret(EXAMPLE, interp)


def test_design_html_writes_out_the_method_and_cautions_and_escapes(results) -> None:
    html = design_views.design_html(results)
    assert EVIL not in html and esc(EVIL) in html
    assert esc(DESIGN_CAUTION) in html
    assert esc(results.design.method) in html and "c&#x27;_k set to zero by the engineer" in html
    for v in results.design.design:
        assert f"{v.phi_d_deg:.1f}" in html
    assert "EN 1997-1 Annex A Table A.4, recommended" in html


def test_envelope_figure_draws_the_stored_bands_of_every_pick_type(results) -> None:
    for group in dict.fromkeys(s.group for s in results.envelope_statistics):
        plot = envelope_figure(results, group).children[0]
        assert plot.name == f"envelope-{group}"
        areas = [r for r in plot.renderers if isinstance(r, GlyphRenderer) and isinstance(r.glyph, VArea)]
        banded = [st for st in results.envelope_statistics if st.group == group and st.bands
                  and results.envelope(group, st.kind).chosen is not None]
        assert len(areas) == len(banded) > 0  # one confidence band per fitted pick type
        for st in banded:
            reported = "origin" if results.envelope(group, st.kind).reported is Cohesion.ORIGIN else "free"
            band = next(b for b in st.bands if b.fit == reported)
            assert any(list(r.data_source.data["y1"]) == list(band.mean_lower_kpa)
                       and list(r.data_source.data["y2"]) == list(band.mean_upper_kpa) for r in areas)
            lines = [r for r in plot.renderers if isinstance(r, GlyphRenderer) and isinstance(r.glyph, MultiLine)]
            assert any(list(r.data_source.data["ys"][0]) == list(band.prediction_lower_kpa)
                       and list(r.data_source.data["ys"][1]) == list(band.prediction_upper_kpa) for r in lines)
        legend = plot.right[0]
        assert legend.click_policy == "hide"
        labels = [item.label.value for item in legend.items]
        for st in banded:
            if st.power is not None:
                assert any("power law" in lab and lab.startswith(st.kind.replace("_", " ")) for lab in labels)
    d = results.design
    plot = envelope_figure(results, d.group).children[0]
    labels = [item.label.value for item in plot.right[0].items]
    assert any(lab.startswith("characteristic line: c'_k") for lab in labels)


def test_other_tables_render_and_show_the_general_caution(results) -> None:
    for make in (design_views.statistics_table, design_views.set_comparison_table, design_views.critical_state_table,
                 design_views.dilatancy_table):
        html = make(results)
        assert html.startswith("<table") or html.startswith("<p>")
    assert "Davis 1968" in design_views.dilatancy_table(results)
    assert "F-test of coincident lines" in design_views.set_comparison_table(results)
    for line in results.critical_state_lines:
        assert critical_state_figure(results, line).children[0].name == f"csl-{line.group}"


def test_show_design_displays_both_cautions(results, monkeypatch: pytest.MonkeyPatch) -> None:
    shown: list[str] = []
    from kernels_helpers.views import notebook, sections

    monkeypatch.setattr(sections, "display", lambda obj: shown.append(obj.data))
    notebook.show_design(results)
    assert any(esc(DESIGN_CAUTION) in h for h in shown)
    assert any(esc(CAUTION) in h for h in shown)


def test_power_law_angles_at_a_stress_the_engineer_names(results) -> None:
    html = design_views.power_law_angle_table(results, [75.0])
    for st in results.envelope_statistics:
        if st.power is not None:  # tan phi_t = b tan phi_s (REFERENCES sec. 6 [C]); values from the stored fit
            assert f"{float(st.power.phi_secant_deg(75.0)):.1f} / {float(st.power.phi_tangent_deg(75.0)):.1f}" in html
    assert "at 75 kPa" in html


def test_stage_row_has_one_toolbar_working_all_three_plots() -> None:
    from bokeh.models import GridPlot, SaveTool, ToolProxy

    from kernels_helpers.views.figures import stage_figure

    results = interpret(EXAMPLE)  # with the example's interpretation file: a manual peak on BH03-D2
    s = next(s for s in results.stages if s.peak.source == "manual")
    row = stage_figure(s)
    assert isinstance(row, GridPlot)
    plots = [child for child, _, _ in row.children]
    assert [p.name for p in plots] == [f"stage-{s.stage_id}-{k}" for k in ("tau", "y", "e")]
    assert all(p.toolbar_location is None for p in plots)  # the row's toolbar replaces theirs
    proxies = [t for t in row.toolbar.tools if isinstance(t, ToolProxy)]
    assert {type(p.tools[0]).__name__ for p in proxies} == {"PanTool", "BoxZoomTool", "WheelZoomTool", "ResetTool",
                                                            "HoverTool"}
    for proxy in proxies:  # each proxy joins the same tool of the three plots
        assert [next(p for p in plots if t in p.toolbar.tools) for t in proxy.tools] == plots
    assert sum(isinstance(t, SaveTool) for t in row.toolbar.tools) == 1
    tau = plots[0]
    labels = [item.label.value for item in tau.select(type=Legend)[0].items]
    assert labels == ["readings", "critical state (window mean)", "peak", "peak suggested"]
    drawn = {(r.glyph.x, r.glyph.y): r.data_source.data for r in tau.renderers}
    assert (drawn[("x", "tau")]["tau"] == [s.peak.chosen.tau_kpa]
            and drawn[("x_sug", "tau_sug")]["tau_sug"] == [s.peak.suggested.tau_kpa])
    assert list(drawn[("x", "tau")]["x"]) == [s.peak.chosen.x_mm]


def test_a_figure_is_shown_as_bokeh_io_show_shows_it_in_a_notebook(results, monkeypatch: pytest.MonkeyPatch) -> None:
    """show_static leaves the session's document out; the two outputs are bokeh.io.show's (Bokeh as the reference),
    model for model, once ids, made at random, are numbered in order of appearance."""
    import re

    import bokeh.io.notebook
    from bokeh.io import curdoc, output_notebook, reset_output, show

    from kernels_helpers.views import sections
    from kernels_helpers.views.figures import stage_figure

    published: list[tuple[dict, dict | None]] = []
    record = lambda data, metadata=None: published.append((data, metadata))  # noqa: E731
    monkeypatch.setattr(bokeh.io.notebook, "publish_display_data", record)
    monkeypatch.setattr(sections, "publish_display_data", record)
    output_notebook(hide_banner=True)
    published.clear()  # BokehJS itself, loaded by output_notebook

    def numbered(outputs: list[tuple[dict, dict | None]]) -> str:
        ids: dict[str, str] = {}
        text = repr(outputs)
        return re.sub(r"\bp\d+\b|[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}",
                      lambda m: ids.setdefault(m.group(0), f"id{len(ids)}"), text)

    stage = results.stages[0]
    try:
        show(stage_figure(stage))
        by_bokeh = published[:]
        published.clear()
        curdoc().clear()
        sections.show_static(stage_figure(stage))
    finally:
        reset_output()  # this test process is no notebook for the tests after this one
    assert len(by_bokeh) == 2 and len(published) == 2  # the div, then the script that draws it
    assert numbered(published) == numbered(by_bokeh)
    assert curdoc().roots == []  # the session's document was left alone
