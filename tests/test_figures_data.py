"""A figure's data, as verify reads it without drawing, is what the drawn figure plots, in the record's order.

verify compares a record's plotted data with a re-run's :class:`~kernels_helpers.views.figures.Plot`
sources, never drawing a figure; the record tags its drawn figure's sources in Bokeh's walk of the
models (``collect_models``). The two must agree source for source, column for column, value for value.
Every verify test of a record checks this on the example project (SI and US units), the hand-logged set
and the hostile record; here are the cases those records do not draw: the residual of a reversal test,
a manual critical-state window, either reported fit, a set left with too few stages for a free fit or
for any fit, a stage excluded from its envelope; each in SI and US units.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path
from typing import Any

import pytest
from conftest import copy_example
from synthetic import reversal_project

from kernels_helpers import Interpretation, interpret, load_project
from kernels_helpers.decisions import Cohesion
from kernels_helpers.views.figures import Plot
from kernels_helpers.views.sections import SECTIONS, Context, sources_of
from kernels_helpers.views.visible import _plain


def _same(a: Any, b: Any) -> bool:
    """Equal, NaN equal to NaN (a stage without a secant angle plots NaN)."""
    if isinstance(a, float) and isinstance(b, float):
        return a == b or (math.isnan(a) and math.isnan(b))
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b, strict=True))
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    return type(a) is type(b) and a == b


def _plots(results: Any, project: Any, units: str | None) -> list[tuple[str, int, Plot]]:
    ctx = Context(results, project, None, {"units": units} if units else {})
    return [(name, i, part) for name, make in SECTIONS.items() if name not in ("summary", "signoff")
            for i, part in enumerate(make(ctx)) if isinstance(part, Plot)]


def _awkward_example(tmp_path: Path, cohesion: Cohesion) -> tuple[Any, Any]:
    """The example with a manual critical-state window and, in the loose set, a stage excluded: two stages left
    for its critical-state line (the line through the origin), none for its peak (no distinct peak)."""
    root = copy_example(tmp_path / "example")
    interp = Interpretation()
    interp = dataclasses.replace(interp, settings=dataclasses.replace(
        interp.settings, fit=dataclasses.replace(interp.settings.fit, cohesion=cohesion)))
    interp = (interp.with_critical_state("BH03-D1", 6.0, 8.0, "A. Tester", "by eye")
              .excluded("BH03-L1", "disturbed in trimming", "A. Tester"))
    project = load_project(root)
    return interpret(project, interp), project


@pytest.mark.parametrize("case", ["reversal", Cohesion.FREE, Cohesion.ORIGIN])
def test_each_figure_s_data_is_what_its_drawn_figure_plots_in_the_record_s_order(case: str, tmp_path: Path) -> None:
    if case == "reversal":
        project = load_project(reversal_project(tmp_path / "p"))
        results = interpret(project)
    else:
        results, project = _awkward_example(tmp_path, Cohesion(case))
    roles: set[str] = set()
    for units in (None, "US"):
        for name, i, plot in _plots(results, project, units):
            drawn = [{k: _plain(v) for k, v in s.data.items()} for s in sources_of(plot.figure())]
            data = [{k: _plain(v) for k, v in columns.items()} for columns in plot.sources.values()]
            assert len(drawn) == len(data), (name, i, list(plot.sources))
            for n, (a, b) in enumerate(zip(drawn, data, strict=True)):
                assert _same(a, b), (name, i, list(plot.sources)[n])
            roles.update(f"{name}/{role.rpartition(':')[2]}" for role in plot.sources)
    if case == "reversal":
        assert any(s.residual is not None for s in results.stages)
        residual = [e for e in results.envelopes if e.kind == "residual"]
        assert residual and all(e.chosen is None for e in residual) and "envelopes/points" in roles
        return
    # the awkward cases were drawn: a residual envelope not fitted (above); a manual window, an envelope of no stage
    assert results.stage("BH03-D1").critical_state.source == "manual"
    assert results.envelope("BH03 loose", "peak").chosen is None
    assert {"envelopes/excluded", "envelopes/line", "envelopes/mean band"} <= roles
    assert results.envelope("BH03 dense", "peak").reported is case
    loose = results.envelope("BH03 loose", "critical_state")  # two stages: through the origin whatever was asked
    assert loose.chosen is not None and loose.reported is Cohesion.ORIGIN and len(loose.stage_ids) == 2
