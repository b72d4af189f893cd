"""Manual apparatus: readings in gauge divisions, calibrations, apparatus corrections, hand-logged sheets.

Checks against hand calculations and the published rules named beside them:
* PCHIP (Fritsch and Carlson 1980, SIAM J. Numer. Anal. 17(2)): interior slopes are the weighted
  harmonic mean of the neighbouring secants, end slopes by the one-sided three-point formula
  (Moler, Numerical Computing with MATLAB, 2004, ch. 3); values hand-computed below.
* Apparatus friction and calibration over the working range: BS 1377-7:1990 cl. 4.4.3.2 and
  ISO 17892-10:2018 cl. 5 (from memory). Lid weight: W = m g_n with g_n = 9.80665 m/s2 (exact, CGPM 1901).
"""

from __future__ import annotations

import csv
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from kernels_helpers import interpret
from kernels_helpers.calibration import evaluate, outside_range, range_note
from kernels_helpers.errors import ProjectFileError
from kernels_helpers.project import CalibrationSpec, load_project
from kernels_helpers.readings import read_stage

HAND = Path(__file__).resolve().parent.parent / "example_project" / "hand_logged"


def _cal(kind: str, **kw) -> CalibrationSpec:
    base = {"name": "c", "kind": kind, "input_unit": "div", "output_unit": "N", "source": "test", "date": "2026-01-01",
            "range": (0.0, 1000.0)}
    return CalibrationSpec(**{**base, **kw})


def test_linear_and_polynomial_calibrations_against_hand_values() -> None:
    assert evaluate(_cal("linear", factor=0.01, output_unit="mm"), np.array([150.0]))[0] == pytest.approx(1.5)
    assert evaluate(_cal("linear", factor=1.5, offset=2.0), np.array([100.0]))[0] == pytest.approx(152.0)
    # 0.5 + 1.5 x 400 + 0.00015 x 400^2 = 0.5 + 600 + 24 = 624.5 (by hand)
    assert evaluate(_cal("polynomial", coefficients=(0.5, 1.5, 0.00015)), np.array([400.0]))[0] == pytest.approx(624.5)


def test_table_calibration_passes_through_the_certificate_and_follows_pchip_by_hand() -> None:
    cert = _cal("table", inputs=(0.0, 1.0, 2.0), values=(0.0, 1.0, 4.0), range=(0.0, 2.0))
    assert evaluate(cert, np.array([0.0, 1.0, 2.0])).tolist() == [0.0, 1.0, 4.0]
    # by hand: secants 1 and 3; interior slope 2/(1/1 + 1/3) = 1.5; end slope at 0 by the three-point formula
    # ((2h0 + h1) d0 - h0 d1)/(h0 + h1) = (3 - 3)/2 = 0. Hermite basis at t = 0.5 on [0, 1]:
    # 0.5 p0 + 0.125 m0 + 0.5 p1 - 0.125 m1 = 0.5 - 0.1875 = 0.3125
    assert evaluate(cert, np.array([0.5]))[0] == pytest.approx(0.3125, abs=1e-12)
    line = _cal("table", inputs=(0.0, 100.0, 200.0), values=(0.0, 150.0, 300.0), range=(0.0, 200.0))
    assert evaluate(line, np.array([37.0, 150.0]))[0] == pytest.approx(55.5)  # collinear points: a straight line
    # beyond the table: the straight line of the end segment, and flagged
    assert evaluate(line, np.array([250.0]))[0] == pytest.approx(375.0)
    assert outside_range(line, np.array([-1.0, 0.0, 200.0, 201.0])).tolist() == [True, False, False, True]
    note = range_note(line, np.array([10.0, 250.0, 205.0]), "shear force", "at line 7 of S1.csv")
    assert note is not None and "2 reading(s) outside the calibrated range 0-200 div" in note and "250 div" in note


@given(st.lists(st.floats(min_value=0.1, max_value=50.0), min_size=2, max_size=12),
       st.lists(st.one_of(st.just(0.0), st.floats(min_value=1e-6, max_value=80.0)), min_size=2, max_size=12))
def test_pchip_tables_never_overshoot_between_certificate_points(steps_x: list[float], steps_y: list[float]) -> None:
    n = min(len(steps_x), len(steps_y))
    xs = np.concatenate([[0.0], np.cumsum(steps_x[:n])])
    ys = np.concatenate([[0.0], np.cumsum(steps_y[:n])])  # values that only rise (flat parts allowed)
    cal = _cal("table", inputs=tuple(xs), values=tuple(ys), range=(0.0, float(xs[-1])))
    grid = np.linspace(0.0, xs[-1], 400)
    out = evaluate(cal, grid)
    assert np.all(np.diff(out) >= -1e-9 * max(1.0, ys[-1]))  # monotone
    k = np.clip(np.searchsorted(xs, grid, side="right") - 1, 0, len(xs) - 2)
    assert np.all(out >= ys[k] - 1e-9) and np.all(out <= ys[k + 1] + 1e-9)  # inside each certificate step


def _project_with(tmp_path: Path, extra: str, columns: str | None = None) -> Path:
    project = tmp_path / "p"
    shutil.copytree(HAND, project, ignore=shutil.ignore_patterns("records", "*.py"))
    toml = project / "project.toml"
    text = toml.read_text(encoding="utf-8") + extra
    if columns is not None:
        text = text.replace('shear_force = { column = "Ring dial (div)", unit = "div", calibration = "PR-07" }',
                            columns)
    toml.write_text(text, encoding="utf-8")
    return project


@pytest.mark.parametrize("extra, columns, said", [
    ("", 'shear_force = { column = "Ring dial (div)", unit = "div" }', "a column in divisions needs its calibration"),
    ("", 'shear_force = { column = "Ring dial (div)", unit = "div", calibration = "PR-7" }',
     "no [calibration.PR-7] in the project file (calibrations given: H-dial, PR-07, V-dial, box2-compliance"),
    ("", 'shear_force = { column = "Ring dial (div)", unit = "N", calibration = "PR-07" }',
     "a calibration converts readings in divisions"),
    ('\n[calibration.bad]\nkind = "table"\noutput_unit = "N"\ninputs = [0, 2, 1]\nvalues = [0, 1, 2]\n'
     'source = "x"\ndate = "2026"\n', None, "[calibration.bad]: inputs must increase strictly"),
    ('\n[calibration.bad]\nkind = "table"\noutput_unit = "N"\ninputs = [0, 1, 2]\nvalues = [0, 2, 1]\n'
     'source = "x"\ndate = "2026"\n', None, "values must rise (or fall) throughout"),
    ('\n[calibration.bad]\nkind = "linear"\noutput_unit = "N"\nfactor = 1.5\nsource = "x"\ndate = "2026"\n', None,
     "give range = [low, high]"),
    ('\n[calibration.bad]\nkind = "linear"\noutput_unit = "N"\nfactor = 1.5\nrange = [0, 1]\ndate = "2026"\n',
     None, "calibration.bad.source"),
])
def test_calibration_mistakes_are_named(tmp_path: Path, extra: str, columns: str | None, said: str) -> None:
    with pytest.raises(ProjectFileError) as err:
        load_project(_project_with(tmp_path, extra, columns))
    assert said in str(err.value), str(err.value)


def test_drive_measurement_needs_the_ring_in_divisions(tmp_path: Path) -> None:
    project = _project_with(tmp_path, "", 'shear_force = { column = "Ring dial (div)", unit = "kN" }')
    with pytest.raises(ProjectFileError, match="horizontal_measured_at = \"drive\" takes the proving ring's own "):
        load_project(project)


def test_each_correction_against_a_hand_calculation() -> None:
    project = load_project(HAND)
    spec = project.stage("BH05-H2")
    r = read_stage(spec)
    t = r.table
    raw = list(csv.reader((HAND / "readings" / "BH05-H2.csv").open(encoding="utf-8")))[3:]
    hdiv = np.array([float(row[1]) for row in raw])
    ring = np.array([float(row[2]) for row in raw])
    # the drive's dial: 0.01 mm/div; the ring's compression: its dial x 0.002 mm/div, taken out
    assert np.allclose(t["measured:x_mm"], hdiv * 0.01)
    assert np.allclose(t["x_mm"], hdiv * 0.01 - ring * 0.002)
    # the ring's force from its certificate (PCHIP through it); box friction from the empty-box table at the
    # box's travel, subtracted while the box moves forward
    force = evaluate(spec.columns["shear_force"].calibration, ring)
    travel = np.abs(t["x_mm"].to_numpy() - t["x_mm"].to_numpy()[0])
    friction = np.interp(travel, [0, 2, 4, 6, 8, 10], [2.0, 2.4, 2.8, 3.1, 3.5, 3.8])
    assert np.allclose(t["measured:shear_force_n"], force)
    assert np.allclose(t["shear_force_n"], force - friction, atol=0.02)  # PCHIP of the friction table ~ linear
    # lid, pad and hanger: 650 g x 9.80665 = 6.374 N added to the hanger's 350 N
    assert spec.normal_load.force_n == pytest.approx(350.0 + 0.650 * 9.80665)
    assert "plus lid, pad and hanger 650 g x g_n = 6.37 N" in spec.normal_load.given_as
    # compliance: the normal load does not change during shearing, so neither does the apparatus deflection
    assert np.all(t["correction:vertical compliance (change during shearing)"] == 0.0)


def test_corrections_are_stated_at_the_peak_and_a_large_one_is_flagged(tmp_path: Path) -> None:
    res = interpret(HAND)
    s = res.stage("BH05-H3")
    named = {c.name: c for c in s.corrections}
    assert set(named) == {"proving ring deflection", "box friction", "vertical compliance (change during shearing)",
                          "lid, pad and hanger weight"}
    ring = named["proving ring deflection"]
    assert ring.share == pytest.approx(abs(ring.at_peak) / abs(ring.measured_at_peak))
    d = res.to_dict()["stages"][2]["apparatus_corrections"]
    assert {c["name"] for c in d} == set(named) and all("flagged" in c for c in d)
    assert not any(f.startswith("apparatus correction large") for f in s.flags)  # 23.8 % < the stated 25 %
    strict = _project_with(tmp_path, "")
    toml = strict / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace("flag_share = 0.25", "flag_share = 0.10"),
                    encoding="utf-8")
    flags = interpret(strict).stage("BH05-H3").flags
    assert any(f.startswith("apparatus correction large: proving ring deflection 0.714 mm at the peak is 23.8 % of "
                            "the measured 3 mm (flagged above 10 %") for f in flags), flags


def test_compliance_takes_out_the_change_of_apparatus_deflection_with_load(tmp_path: Path) -> None:
    """A normal-force column that changes during shearing: y is corrected by c(N) - c(N0), c = 0.00004 mm/N."""
    project = _project_with(tmp_path, "")
    sheet = project / "readings" / "BH05-H1.csv"
    rows = list(csv.reader(sheet.open(encoding="utf-8")))
    rows[2].append("Normal load (N)")
    for i, row in enumerate(rows[3:]):
        row.append(f"{176.4 + 10 * i:.1f}")  # rising by 10 N a reading (a lever that binds, say)
    with sheet.open("w", newline="", encoding="utf-8") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)
    toml = project / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace(
        '[stage.columns]\ntime = { column = "Time (min)", unit = "min" }',
        '[stage.columns]\ntime = { column = "Time (min)", unit = "min" }\n'
        'normal_force = { column = "Normal load (N)", unit = "N" }'), encoding="utf-8")
    r = read_stage(load_project(project).stage("BH05-H1"))
    change = r.table["correction:vertical compliance (change during shearing)"].to_numpy()
    assert change[5] == pytest.approx(0.00004 * 50.0)  # 5 readings on: 50 N more, 0.002 mm more deflection
    assert np.allclose(r.table["y_mm"] - r.table["measured:y_mm"], change)


def test_a_sparse_hand_logged_curve_is_kept_as_read_and_picked_at_a_reading() -> None:
    res = interpret(HAND)
    for s in res.stages:
        c = s.reduced.curve
        shear = c[c["in_shear"]]
        assert s.reduced.sparse and len(c) == 33
        assert np.array_equal(c["tau_smooth_kpa"].to_numpy(), c["tau_kpa"].to_numpy())  # no smoothing
        assert not c["spike"].any() and not any("spike" in f for f in s.flags)
        assert s.peak.chosen.x_mm in shear["x_mm"].to_numpy()  # the peak is a reading, not between two
        assert s.peak.chosen.tau_kpa == pytest.approx(float(shear["tau_kpa"].max()))
        x, y = shear["x_mm"].to_numpy(), shear["y_mm"].to_numpy()
        i = 10  # dy/dx between neighbouring readings (central difference, unequal steps)
        h0, h1 = x[i] - x[i - 1], x[i + 1] - x[i]
        by_hand = (h0**2 * y[i + 1] - h1**2 * y[i - 1] + (h1**2 - h0**2) * y[i]) / (h0 * h1 * (h0 + h1))
        assert shear["dydx"].to_numpy()[i] == pytest.approx(by_hand)
    rate = "drained-rate check not possible: the readings have no time column"
    assert not any(f.startswith(rate) for f in res.stage("BH05-H1").flags)  # H1 has its times
    assert all(any(f.startswith(rate) for f in res.stage(sid).flags) for sid in ("BH05-H2", "BH05-H3"))
    env = res.envelope("BH05 hand-logged", "peak")
    assert env.chosen is not None and 33 < env.chosen.phi_deg < 41  # the invented model's peak angles, 36-40 deg


def test_a_dense_logger_curve_is_not_sparse() -> None:
    res = interpret(HAND.parent)
    assert not any(s.reduced.sparse for s in res.stages)


def test_the_hand_logging_templates_read_with_the_hand_logged_column_map() -> None:
    import openpyxl

    project = load_project(HAND)
    wanted = {c.column for c in project.stages[0].columns.values()}
    rows = list(csv.reader((HAND / "templates" / "hand_log_template.csv").open(encoding="utf-8")))
    assert wanted <= set(rows[2]) and len(rows) == 3 + 60
    ws = openpyxl.load_workbook(HAND / "templates" / "hand_log_template.xlsx").active
    header = [c.value for c in next(ws.iter_rows(min_row=3, max_row=3))]
    assert header == rows[2]


@pytest.mark.notebook
@pytest.mark.slow
def test_the_record_of_the_hand_logged_set_states_calibrations_and_corrections(tmp_path: Path) -> None:
    from kernels_helpers.record import write_record
    from kernels_helpers.verify import verify_record

    project = tmp_path / "hand"
    shutil.copytree(HAND, project)
    rec = write_record(project, project / "records" / "r.html")
    text = rec.path.read_text(encoding="utf-8")
    assert "Calibrations and apparatus corrections" in text
    assert "proving ring PR-07, calibration certificate FMT-CAL-0712 (invented), 2026-03-02" in text
    assert "table of 9 points, PCHIP (monotonic)" in text and "kept as read" in text
    assert verify_record(rec.path, project).ok
    assert math.isfinite(rec.results["envelopes"][0]["free"]["phi_deg"])


def test_compliance_comes_off_a_settlement_taken_from_the_consolidation_readings(example_copy: Path) -> None:
    toml = example_copy / "project.toml"
    text = toml.read_text(encoding="utf-8").replace("consolidation_settlement_mm = 0.046\n", "", 1)
    text += ('\n[calibration.dummy]\nkind = "linear"\ninput_unit = "N"\noutput_unit = "mm"\nfactor = 0.0001\n'
             'range = [0, 2000]\nsource = "steel dummy (invented)"\ndate = "2026-03-03"\n')
    text = text.replace("force_n = 180.0\n", 'force_n = 180.0\n[stage.apparatus]\nvertical_compliance = "dummy"\n', 1)
    toml.write_text(toml.read_text(encoding="utf-8").replace("consolidation_settlement_mm = 0.046\n", "", 1),
                    encoding="utf-8")  # no declared settlement, no compliance yet
    before = interpret(example_copy).stage("BH03-D1")
    toml.write_text(text, encoding="utf-8")
    s = interpret(example_copy).stage("BH03-D1")
    measured = s.consolidation.final_settlement_mm
    # 180 N x 0.0001 mm/N = 0.018 mm of the measured settlement was the apparatus, not the specimen
    assert s.reduced.settlement_mm == pytest.approx(measured - 0.018)
    assert s.reduced.settlement_source == "consolidation readings"
    stated = next(c for c in s.corrections if c.name == "vertical compliance at the stage's load")
    assert stated.at_peak == pytest.approx(0.018) and stated.measured_at_peak == pytest.approx(measured)
    assert before.reduced.settlement_mm == pytest.approx(measured)  # without the calibration: all of it
    assert s.reduced.e_start > before.reduced.e_start  # less settlement: a taller, looser specimen
