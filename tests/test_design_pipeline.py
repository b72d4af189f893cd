"""Design choices in the interpretation file, relative density in the project file, and the wiring of
bands, curved fits, set comparisons, critical-state lines, dilatancy and design values into results."""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import pytest

from kernels_helpers import Interpretation, interpret, load_project
from kernels_helpers.design import PARTIAL_FACTOR_SETS, regression_characteristic
from kernels_helpers.dilatancy import bolton_index
from kernels_helpers.envelope import confidence_band, prediction_band
from kernels_helpers.errors import InterpretationFileError, ProjectFileError
from kernels_helpers.interpretation import DesignChoices, from_dict, load_interpretation
from kernels_helpers.revisions import save_interpretation

REPO = Path(__file__).resolve().parents[1]
EXAMPLE = REPO / "example_project"


def test_design_choices_default_to_en1997_m2_and_round_trip(tmp_path: Path) -> None:
    d = DesignChoices()
    # EN 1997-1 Annex A Table A.4 set M2 (REFERENCES sec. 7 [P]): 1.25 on tan phi' and on c'
    assert (d.partial_factors, d.gamma_phi, d.gamma_c) == ("M2", *PARTIAL_FACTOR_SETS["M2"]) == ("M2", 1.25, 1.25)
    changed = Interpretation().with_design("A. Engineer", limit_state="local", parameter_set="peak", c_k_zero=True,
                                           c_k_zero_reason="no cementation; c' not relied on", partial_factors="NA-X",
                                           gamma_phi=1.3, gamma_c=1.6, note="small strains under the footing")
    assert changed.design.author == "A. Engineer"
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ", changed.design.time_utc)
    path = save_interpretation(changed, tmp_path / "interpretation.json")
    assert load_interpretation(path) == changed
    assert json.loads(path.read_text())["design"]["c_k_zero_reason"] == "no cementation; c' not relied on"


def test_a_file_without_design_choices_reads_with_the_defaults() -> None:
    data = Interpretation().to_dict()
    del data["design"]  # a schema_version 1 file written before the design choices existed
    assert from_dict(data, "old.json").design == DesignChoices()


@pytest.mark.parametrize(
    ("fields", "message"),
    [
        ({"partial_factors": "M2", "gamma_phi": 1.1}, "give them a name of your own"),
        ({"c_k_zero": True}, "c'_k can only be set to zero with a stated reason"),
        ({"limit_state": "regional"}, "design.limit_state: found \"regional\"; allowed: 'large zone' or 'local'"),
        ({"v_known": 1.5}, "coefficient of variation between 0 and 1"),
    ],
)
def test_bad_design_choices_name_the_field(fields: dict, message: str) -> None:
    data = Interpretation().to_dict()
    data["design"].update(fields)
    with pytest.raises(InterpretationFileError, match=re.escape(message)):
        from_dict(data, "x.json")


def test_relative_density_is_read_as_a_fraction(example_copy: Path) -> None:
    toml = example_copy / "project.toml"
    text = toml.read_text()
    # the example gives D1 0.85 and D2 0.88 (invented): set D1 to 0.8 and take D2's away
    text = text.replace("relative_density = 0.85\n", "relative_density = 0.8\n", 1)
    toml.write_text(text.replace("relative_density = 0.88\n", "", 1))
    project = load_project(example_copy)
    assert project.stage("BH03-D1").specimen.relative_density == 0.8
    assert project.stage("BH03-D2").specimen.relative_density is None
    results = interpret(project, Interpretation())
    d1 = next(d for d in results.dilatancy if d.stage_id == "BH03-D1")
    stage = results.stage("BH03-D1")
    # Bolton (1986), REFERENCES sec. 5: I_R = I_D (10 - ln p') - 1 with sigma'n at the peak standing in for p'
    assert d1.bolton is not None
    assert d1.bolton.i_r_raw == pytest.approx(0.8 * (10 - math.log(stage.peak.chosen.sigma_kpa)) - 1)
    assert d1.bolton == bolton_index(0.8, stage.peak.chosen.sigma_kpa)
    assert next(d for d in results.dilatancy if d.stage_id == "BH03-D2").bolton is None
    toml.write_text(text.replace("relative_density = 0.8\n", "relative_density = 80\n", 1))
    message = (r'stage "BH03-D1".specimen.relative_density: relative_density is I_D as a fraction between 0 and 1 '
               r"\(e.g. 0.65\), not 80")
    with pytest.raises(ProjectFileError, match=message):
        load_project(example_copy)


@pytest.fixture(scope="module")
def results():
    return interpret(EXAMPLE, Interpretation())


def test_design_values_follow_the_chosen_envelope_and_range(results) -> None:
    d = results.design
    assert d is not None and d.not_derived is None
    assert (d.group, d.kind) == ("stratum B (all sets)", "critical_state")  # defaults: pooled group, critical state
    env = results.envelope(d.group, d.kind)
    project = load_project(EXAMPLE)
    assert d.stress_range_kpa == project.design_stress_range_kpa
    ref = regression_characteristic(env.chosen, project.design_stress_range_kpa, "large zone", "tangent",
                                    env.chosen.level, (min(env.sigma_kpa), max(env.sigma_kpa)))
    assert (d.c_k_kpa, d.tan_phi_k) == (ref.c_k_kpa, ref.tan_phi_k)
    chosen, other = d.design
    assert (chosen.set_name, other.set_name) == ("M2", "M1")
    assert chosen.tan_phi_d == pytest.approx(d.tan_phi_k / 1.25)  # gamma_phi' on tan phi' (EN 1997-1 Table A.4 M2)
    assert "licensed geotechnical engineer" in d.caution and "National Annex" in d.caution


def test_engineer_sets_c_k_to_zero_with_a_reason() -> None:
    interp = Interpretation().with_design("A. Engineer", c_k_zero=True, c_k_zero_reason="clean sand: no true cohesion",
                                          limit_state="local", parameter_set="peak", group="BH03 dense")
    d = interpret(EXAMPLE, interp).design
    assert d.c_k_kpa == 0.0 and d.characteristic.expressed == "secant" and d.characteristic.bound == "prediction"
    assert d.method.startswith("c'_k set to zero by the engineer (clean sand: no true cohesion)")
    assert "peak parameters" in d.parameter_note and d.group == "BH03 dense"


def test_bands_in_results_match_the_pure_functions(results) -> None:
    for stat in results.envelope_statistics:
        env = results.envelope(stat.group, stat.kind)
        for band in stat.bands:
            fit = env.free if band.fit == "free" else env.origin
            assert band.mean_lower_kpa == pytest.approx(confidence_band(fit, band.sigma_kpa)[0])
            assert band.prediction_upper_kpa == pytest.approx(prediction_band(fit, band.sigma_kpa)[1])
        assert len(stat.secant_phi_deg) == len(env.stage_ids)


def test_results_json_has_the_derived_keys_and_they_are_documented(results) -> None:
    data = json.loads(results.to_json())
    guide = (REPO / "DEVELOPERS.md").read_text(encoding="utf-8")
    section = guide.split("## Results JSON", 1)[1]
    for key in ("envelope_statistics", "set_comparisons", "critical_state_lines", "dilatancy", "design"):
        assert key in data
        assert f"`{key}`" in section, f"results key {key} is not documented in DEVELOPERS.md"
    for key in data:
        assert f"`{key}`" in section, f"top-level results key {key} is not documented in DEVELOPERS.md"
    assert data["design"]["characteristic"]["method"].startswith("lower one-sided 95 % bound")
