"""Display units: US customary (psf, in, lbf) beside SI, for what is shown; stored values stay SI.

Factors are checked against NIST Special Publication 811 (2008), Appendix B.8 "Factors for units
listed alphabetically" (values quoted from memory to the 7 significant figures printed there) and
against pint, a general-purpose units library with its own definitions file.
"""

from __future__ import annotations

import json
import math
import re
import shutil
from pathlib import Path
from typing import TYPE_CHECKING

import pint
import pytest
from bokeh.core.serialization import Serializer
from hypothesis import given
from hypothesis import strategies as st

from kernels_helpers import interpret
from kernels_helpers.cli import main
from kernels_helpers.display_units import PSF_KPA, SI, US, display_for
from kernels_helpers.errors import ProjectFileError
from kernels_helpers.project import load_project
from kernels_helpers.summary import summary_text
from kernels_helpers.units import to_canonical_factor

UREG = pint.UnitRegistry()
# quantity -> (canonical unit, US unit) in pint's spelling
PINT = {"stress": ("kPa", "lbf/ft**2"), "length": ("mm", "inch"), "force": ("N", "lbf"),
        "cv": ("m**2/year", "ft**2/year"), "rate": ("mm/min", "inch/min")}

if TYPE_CHECKING:
    from conftest import ExampleRecord


def test_factors_agree_with_nist_sp_811_appendix_b() -> None:
    # NIST SP 811 B.8 (from memory): pound-force per square foot to pascal 4.788 026 E+01; inch to metre
    # 2.54 E-02 (exact); pound-force to newton 4.448 222 E+00; square foot to square metre 9.290 304 E-02 (exact);
    # pound-force per square inch to pascal 6.894 757 E+03
    assert math.isclose(PSF_KPA * 1000, 4.788026e1, rel_tol=5e-7)
    assert US.factor("length") == 1 / 25.4  # mm -> in, exact
    assert math.isclose(1 / US.factor("force"), 4.448222, rel_tol=5e-7)  # lbf in N
    assert math.isclose(1 / US.factor("cv"), 9.290304e-2, rel_tol=1e-12)  # ft2 in m2, exact
    assert math.isclose(1 / US.factor("stress"), 4.788026e-2, rel_tol=5e-7)  # psf in kPa
    # the readings' own table (units.py) uses the same definitions
    assert math.isclose(to_canonical_factor("psi", "normal_stress", "t") * 1000, 6.894757e3, rel_tol=5e-7)
    assert math.isclose(to_canonical_factor("psf", "normal_stress", "t"), PSF_KPA, rel_tol=1e-15)


@pytest.mark.parametrize("quantity", sorted(PINT))
def test_factors_agree_with_pint(quantity: str) -> None:
    canonical, us = PINT[quantity]
    expected = UREG.Quantity(1.0, canonical).to(us).magnitude
    # pint's year is the Julian year (365.25 d) on both sides, so c_v's ratio is the area ratio alone
    assert math.isclose(US.factor(quantity), expected, rel_tol=1e-12), (quantity, US.factor(quantity), expected)
    assert SI.factor(quantity) == 1.0


@given(st.sampled_from(sorted(PINT)), st.floats(min_value=-1e6, max_value=1e6, allow_nan=False))
def test_a_typed_value_goes_back_to_the_canonical_value(quantity: str, value: float) -> None:
    assert math.isclose(US.canonical(quantity, US.value(quantity, value)), value, rel_tol=1e-12, abs_tol=1e-12)
    assert SI.canonical(quantity, SI.value(quantity, value)) == value


def test_shown_numbers_never_read_minus_zero_and_carry_their_unit() -> None:
    assert US.with_unit("stress", -0.01, 1) == "0 psf" and SI.with_unit("stress", -0.01, 1) == "0.0 kPa"
    assert US.with_unit("stress", 100.0, 1) == "2089 psf"  # 100 kPa = 2088.5 psf
    assert US.with_unit("length", 2.51, 2) == "0.099 in" and SI.label("tau", "stress") == "tau (kPa)"
    assert US.text("stress", None) == "n/a"


def test_annotate_adds_us_values_beside_si_quantities_only() -> None:
    text = "tau 155.2 kPa at 2.51 mm, 0.0753 mm/min, c_v 3.20 m2/yr, N 180.0 N; 12.7 t_100, e at 100 kPa"
    assert SI.annotate(text) == text
    out = US.annotate(text)
    assert "155.2 kPa [3241 psf]" in out and "2.51 mm [0.099 in]" in out and "0.0753 mm/min [0.002965 in/min]" in out
    assert "3.20 m2/yr [34.4 ft2/yr]" in out and "180.0 N [40.47 lbf]" in out and "12.7 t_100," in out
    assert "100 kPa [2089 psf]" in out
    assert US.annotate("mmHg 5 Nm") == "mmHg 5 Nm"  # no unit it does not know


def test_unknown_unit_system_is_refused_in_words() -> None:
    with pytest.raises(ValueError, match=r"display\] units: 'metric' is not a unit system; use \"SI\" or \"US\""):
        display_for("metric", "project.toml: [display] units")
    assert display_for("us") is US and display_for(None) is SI


def _us_project(example_copy: Path) -> Path:
    toml = example_copy / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8") + '\n[display]\nunits = "US"\n', encoding="utf-8")
    return example_copy


def test_project_setting_changes_only_what_is_shown(example_copy: Path, capsys: pytest.CaptureFixture[str]) -> None:
    si = interpret(example_copy).to_json()
    _us_project(example_copy)
    assert load_project(example_copy).display_units == "US"
    assert interpret(example_copy).to_json() == si  # the results stay SI, byte for byte
    assert main(["summary", str(example_copy)]) == 0
    out = capsys.readouterr().out
    res = interpret(example_copy)
    s = res.stages[0]
    assert f"sigma'n {s.sigma_nominal_kpa / PSF_KPA:.0f} psf" in out and "Display units: US customary" in out
    assert main(["summary", str(example_copy), "--units", "si"]) == 0  # the command line overrides the project
    assert f"sigma'n {s.sigma_nominal_kpa:.0f} kPa" in capsys.readouterr().out


def test_a_bad_display_setting_names_the_key(example_copy: Path) -> None:
    toml = example_copy / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8") + '\n[display]\nunits = "metric"\nunit = "US"\n',
                    encoding="utf-8")
    with pytest.raises(ProjectFileError) as err:
        load_project(example_copy)
    text = str(err.value)
    assert 'display.units: found "metric"; allowed: ' in text
    assert "display.unit: unknown key 'unit'; did you mean units?" in text


def test_summary_in_us_units_is_the_si_summary_converted(example_copy: Path) -> None:
    res = interpret(example_copy)
    us = summary_text(res, US)
    for e in res.envelopes:
        if e.chosen is not None and not e.chosen.through_origin:
            assert f"c' {US.fmt('stress', e.chosen.intercept, 1)} psf" in us
            assert f"phi' {e.chosen.phi_deg:.1f} deg" in us  # angles are the same in both
    assert "kPa [" in us or "kPa" not in us.split("Envelopes")[1]


def test_csv_export_in_us_units_renames_and_converts_and_ags4_is_unchanged(example_copy: Path,
                                                                           tmp_path: Path) -> None:
    import csv

    assert main(["export", str(example_copy), "--csv", str(tmp_path / "si"), "--ags4", str(tmp_path / "si.ags"),
                 "--date", "2026-12-02", "-q"]) == 0
    assert main(["export", str(example_copy), "--csv", str(tmp_path / "us"), "--ags4", str(tmp_path / "us.ags"),
                 "--date", "2026-12-02", "--units", "US", "-q"]) == 0
    assert (tmp_path / "si.ags").read_bytes() == (tmp_path / "us.ags").read_bytes()  # AGS4 prescribes its units
    si = list(csv.DictReader((tmp_path / "si" / "stages.csv").open(encoding="utf-8")))
    us = list(csv.DictReader((tmp_path / "us" / "stages.csv").open(encoding="utf-8")))
    assert "peak_tau_psf" in us[0] and "peak_x_in" in us[0] and "normal_force_lbf" in us[0]
    assert "peak_tau_kpa" not in us[0] and "peak_phi_secant_deg" in us[0]
    for a, b in zip(si, us, strict=True):
        assert math.isclose(float(b["peak_tau_psf"]), float(a["peak_tau_kpa"]) / PSF_KPA, rel_tol=1e-12)
        assert math.isclose(float(b["peak_x_in"]), float(a["peak_x_mm"]) / 25.4, rel_tol=1e-12)
        assert b["peak_phi_secant_deg"] == a["peak_phi_secant_deg"] and b["id"] == a["id"]
    env = next(csv.DictReader((tmp_path / "us" / "envelopes.csv").open(encoding="utf-8")))
    assert "c_psf" in env and "c_ci_low_psf" in env and "residual_sd_psf" in env


def test_manual_picks_are_typed_in_inches_and_stored_in_mm(example_copy: Path) -> None:
    from kernels_helpers.views.widgets import live_workbook

    wb = live_workbook(_us_project(example_copy), author="T. Tester")
    assert wb.u is US
    panel = wb.select("BH03-D3")
    assert panel.peak_x.description == "peak at x (in)"
    before = wb.controller.stage("BH03-D3")
    typed_in = round(before.peak.chosen.x_mm / 25.4 + 0.02, 4)  # about half a millimetre further on
    panel.peak_x.value = typed_in
    saved = json.loads(wb.controller.path.read_text(encoding="utf-8"))["stages"]["BH03-D3"]["peak"]
    assert saved["source"] == "manual"
    assert abs(saved["x_mm"] - typed_in * 25.4) < 0.05  # snapped to a reading near the typed place, stored in mm
    assert panel.peak_x.value == round(saved["x_mm"] / 25.4, 4)
    # the plotted marker is in inches and psf, and the page sends inches back
    assert math.isclose(panel.plots.peak.data["x"][0], saved["x_mm"] / 25.4, rel_tol=1e-12)
    tau = wb.controller.stage("BH03-D3").peak.chosen.tau_kpa
    assert math.isclose(panel.plots.peak.data["y"][0], tau / PSF_KPA, rel_tol=1e-12)
    bokeh_model = wb.bokeh
    target_in = (saved["x_mm"] + 0.5) / 25.4
    content = {"event": "jsevent", "kind": "ModelChanged", "model": {"id": panel.plots.peak.id}, "attr": "data",
               "new": Serializer().encode({"x": [target_in], "y": panel.plots.peak.data["y"]})}
    bokeh_model._sync_model(bokeh_model, content, [])
    dragged = json.loads(wb.controller.path.read_text(encoding="utf-8"))["stages"]["BH03-D3"]["peak"]
    assert abs(dragged["x_mm"] - target_in * 25.4) < 0.05
    assert "(psf)" in wb.stage_table.widget.children[0].children[1].value
    assert "psf" in wb.parameters.value and "kPa" not in re.sub(r"\[[^\]]*\]", "", wb.parameters.value.split(
        "<table")[1])


@pytest.mark.notebook
@pytest.mark.slow
def test_a_us_record_shows_us_units_embeds_si_and_verifies(example_copy: Path, tmp_path: Path,
                                                           example_record: ExampleRecord) -> None:
    from conftest import kernels_of_this_process

    from kernels_helpers.record import write_record
    from kernels_helpers.verify import read_record, verify_record

    si_results = read_record(example_record.path)[0]  # the suite's SI record of the same unchanged project
    us = write_record(example_copy, example_copy / "records" / "us.html", units="US")
    assert kernels_of_this_process() == []  # a record stops its kernel (test_record: after a failed cell too)
    assert us.results == si_results  # the embedded results are SI and the same
    text = us.path.read_text(encoding="utf-8")
    assert "Display units: US customary (psf, in, lbf)" in text
    env = next(e for e in si_results["envelopes"] if e["free"] and e["reported"] == "free")
    c_psf = US.fmt("stress", env["free"]["c_kpa"], 1)
    assert f"<td>{c_psf} [" in text and "(psf) [95 % CI]" in text
    assert "horizontal displacement (in)" in text and "shear stress tau (psf)" in text
    v = verify_record(us.path, example_copy)
    assert v.ok and v.shown_compared > 1000, v.to_text()
    # a US record whose display units were edited to SI in its markup no longer matches what it shows
    edited = us.path.with_name("edited.html")
    shutil.copy(us.path, edited)
    stripped = text.replace("""data-sb-args='{"units": "US"}' """, "")
    assert stripped != text
    edited.write_text(stripped, encoding="utf-8")
    assert not verify_record(edited, example_copy).ok
