"""AGS4 export (ags4_export.py), checked by python-ags4: its checker and its reader are the outside reference."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import EXAMPLE
from python_ags4 import AGS4  # the AGS4 data-format group's own library: checker, reader, dictionary
from synthetic import Model, reversal_readings, write_project

from kernels_helpers.ags4_export import PARAMETER_CAUTION, write_ags4
from kernels_helpers.cli import main
from kernels_helpers.errors import ProjectFileError
from kernels_helpers.interpretation import Interpretation, load_interpretation
from kernels_helpers.pipeline import interpret
from kernels_helpers.project import load_project
from kernels_helpers.results import Results

DATE = "2026-12-01"


def _errors(path: Path) -> dict[str, list[dict[str, object]]]:
    """python-ags4's checker; only the rule and process errors (not metadata or the data summary)."""
    return _rule_errors(AGS4.check_file(str(path)))


def _rule_errors(report: dict[str, list[dict[str, object]]]) -> dict[str, list[dict[str, object]]]:
    return {k: v for k, v in report.items() if "Rule" in k or "Error" in k}


def _read(path: Path) -> dict[str, pd.DataFrame]:
    tables, _ = AGS4.AGS4_to_dataframe(str(path))
    return {g: AGS4.convert_to_numeric(t) for g, t in tables.items()}


def _types(path: Path, group: str) -> dict[str, str]:
    tables, _ = AGS4.AGS4_to_dataframe(str(path))
    t = tables[group]
    return t[t["HEADING"] == "TYPE"].iloc[0].to_dict()


def _half_unit(value: float, dtype: str) -> float:
    """Half of the last digit a TYPE keeps: the largest rounding error of a value written to it."""
    if dtype.endswith("DP"):
        return 0.5 * 10.0 ** -int(dtype[:-2]) + 1e-12
    digits = int(dtype[:-2])  # nSF
    return 0.5 * 10.0 ** (math.floor(math.log10(abs(value))) - digits + 1) + 1e-12 if value else 1e-12


@pytest.fixture(scope="module")
def example() -> tuple[Results, Interpretation]:
    interp = load_interpretation(EXAMPLE / "interpretation.json")
    return interpret(EXAMPLE, interp), interp


@pytest.fixture(scope="module")
def ags_file(example: tuple[Results, Interpretation], tmp_path_factory: pytest.TempPathFactory) -> Path:
    results, interp = example
    return write_ags4(load_project(EXAMPLE), results, interp, tmp_path_factory.mktemp("ags") / "shear.ags", DATE)


def test_checker_reports_no_errors(ags_file: Path) -> None:
    report = AGS4.check_file(str(ags_file))  # one check (seconds), read both ways
    assert _rule_errors(report) == {}
    assert AGS4.count_errors(report)[0] == 0


def test_checker_does_catch_a_badly_formatted_value(ags_file: Path, tmp_path: Path) -> None:
    """Control: the same checker refuses the file once one 1DP peak stress carries two decimals."""
    text = ags_file.read_bytes().decode("ascii")
    line = next(ln for ln in text.split("\r\n") if ln.startswith('"DATA","BH03"') and '"BH03-D1"' in ln)
    bad_line = re.sub(r'"(\d+\.\d)","(\d+\.\d\d)","(-?\d+\.\d\d)","2.65"', r'"\g<1>0","\2","\3","2.65"', line, count=1)
    assert bad_line != line
    bad = tmp_path / "bad.ags"
    bad.write_bytes(text.replace(line, bad_line).encode("ascii"))
    assert "AGS Format Rule 8" in _errors(bad)


def test_file_is_ascii_with_crlf_and_the_groups_in_order(ags_file: Path) -> None:
    raw = ags_file.read_bytes()
    raw.decode("ascii")  # raises on anything outside ASCII
    assert b"\n" not in raw.replace(b"\r\n", b"")
    groups = re.findall(r'^"GROUP","(\w+)"', raw.decode("ascii"), flags=re.M)
    assert groups == ["PROJ", "TRAN", "UNIT", "TYPE", "ABBR", "LOCA", "SAMP", "SHBG", "SHBT"]


def test_round_trip_shbt_within_the_rounding_of_each_type(example: tuple[Results, Interpretation],
                                                          ags_file: Path) -> None:
    results, _ = example
    shbt = _read(ags_file)["SHBT"].set_index("SHBT_TESN")
    types = _types(ags_file, "SHBT")
    project = load_project(EXAMPLE)
    assert list(shbt.index) == [s.stage_id for s in results.stages]
    for s in results.stages:
        spec = project.stage(s.stage_id).specimen
        curve = s.reduced.curve
        expected = {
            "SHBT_NORM": s.sigma_nominal_kpa, "SHBT_PEAK": s.peak.chosen.tau_kpa, "SHBT_PDIS": s.peak.chosen.x_mm,
            "SHBT_PDIN": float(curve.loc[s.peak.chosen.index, "y_mm"]), "SHBT_PVST": s.peak.chosen.sigma_kpa,
            "SHBT_IVR": s.reduced.e_initial, "SHBT_HGT": spec.height_mm, "SHBT_DISP": s.rate.rate_mm_min,
            # phase relation rho_d = G_s rho_w / (1 + e_0) (common practice), independent of the export's m/V
            "SHBT_DDEN": spec.gs / (1.0 + s.reduced.e_initial),
        }
        row = shbt.loc[s.stage_id]
        for heading, value in expected.items():
            assert row[heading] == pytest.approx(value, abs=_half_unit(value, types[heading])), (s.stage_id, heading)
        assert float(row["SHBT_PDEN"]) == spec.gs  # XN: text, not converted by the reader
        assert f"critical state tau {s.critical_state.chosen.tau_kpa:.1f} kPa" in row["SHBT_REM"]
        assert all(flag.split(":")[0] in row["SHBT_REM"] for flag in s.flags)
    assert shbt.loc["BH03-D2", "SHBT_CRIT"].startswith("peak: picked by the engineer")
    assert "no distinct peak" in shbt.loc["BH03-L1", "SHBT_REM"]


def test_round_trip_shbg_parameters_and_sign_off(example: tuple[Results, Interpretation], ags_file: Path) -> None:
    results, interp = example
    tables = _read(ags_file)
    shbg = tables["SHBG"].set_index("SPEC_REF")
    types = _types(ags_file, "SHBG")
    dense = results.envelope("BH03 dense", "peak").chosen
    assert dense is not None
    for ref in ("D1", "D2", "D3"):
        assert shbg.loc[ref, "SHBG_PHI"] == pytest.approx(dense.phi_deg,
                                                          abs=_half_unit(dense.phi_deg, types["SHBG_PHI"]))
        assert shbg.loc[ref, "SHBG_PCOH"] == pytest.approx(dense.intercept,
                                                           abs=_half_unit(dense.intercept, types["SHBG_PCOH"]))
        assert "c' free" in shbg.loc[ref, "SHBG_REM"] and "corrected area" in shbg.loc[ref, "SHBG_REM"]
    for ref in ("L1", "L2", "L3"):  # loose: no distinct peak, so no peak envelope to report
        assert math.isnan(shbg.loc[ref, "SHBG_PHI"]) and "peak: not fitted" in shbg.loc[ref, "SHBG_REM"]
    assert all(PARAMETER_CAUTION in r for r in shbg["SHBG_REM"])
    assert set(shbg["SHBG_TYPE"]) == {"SMALL SBOX"} and set(shbg["SHBG_COND"]) == {"REMOULDED"}
    assert set(shbg["TEST_STAT"]) == {interp.signoff.state.capitalize()}
    assert tables["TRAN"].loc[0, "TRAN_STAT"] == interp.signoff.state.capitalize()
    assert tables["TRAN"].loc[0, "TRAN_DATE"] == DATE and tables["TRAN"].loc[0, "TRAN_AGS"] == "4.1.1"
    samp = tables["SAMP"]
    assert sorted(samp["SAMP_TOP"]) == [4.20, 4.45, 4.70] and set(tables["LOCA"]["LOCA_ID"]) == {"BH03"}


def test_sign_off_state_reaches_test_stat(example_copy: Path, tmp_path: Path) -> None:
    interp = load_interpretation(example_copy / "interpretation.json")
    if interp.signoff.state != "draft":
        interp = interp.with_signoff("draft", "A. Engineer")
    checked = interp.with_signoff("checked", "B. Checker")
    path = write_ags4(load_project(example_copy), interpret(example_copy, checked), checked, tmp_path / "c.ags", DATE)
    assert set(_read(path)["SHBG"]["TEST_STAT"]) == {"Checked"}


def test_user_text_with_quotes_and_greek_letters_stays_valid(example_copy: Path, tmp_path: Path) -> None:
    # sigma, prime, curly quotes, straight quotes and plus-minus in the engineer's own words
    reason = '\u03c3\u2032n too \u201chigh\u201d: lid "tilted" at 0.5 mm \u00b10.1'
    interp = load_interpretation(example_copy / "interpretation.json").excluded("BH03-L3", reason, "A. Checker")
    path = write_ags4(load_project(example_copy), interpret(example_copy, interp), interp, tmp_path / "q.ags", DATE)
    assert _errors(path) == {}
    rem = _read(path)["SHBT"].set_index("SHBT_TESN").loc["BH03-L3", "SHBT_REM"]
    assert "excluded from the envelopes: sigma'n too \"high\": lid \"tilted\" at 0.5 mm +/-0.1" in rem


def _edit_project(folder: Path, old: str, new: str) -> None:
    path = folder / "project.toml"
    text = path.read_text(encoding="utf-8")
    assert text.count(old) == 1, old
    path.write_text(text.replace(old, new), encoding="utf-8")


def test_missing_sample_field_names_the_stage_and_the_field(example_copy: Path, tmp_path: Path) -> None:
    _edit_project(example_copy, 'specimen_ref = "D2"\n', "")
    project = load_project(example_copy)
    with pytest.raises(ProjectFileError) as err:
        write_ags4(project, interpret(project), Interpretation(), tmp_path / "x.ags", DATE)
    assert str(err.value) == (
        f"{example_copy.resolve() / 'project.toml'}: stage 'BH03-D2': the AGS4 export needs the sample field(s) "
        "specimen_ref. Add them to the stage's [stage.sample] table (or to [stage_defaults.sample]), e.g. "
        'location_id = "BH03", sample_top_m = 4.20, sample_ref = "12", sample_type = "B", specimen_ref = "D1", '
        "specimen_depth_m = 4.20.")
    assert not (tmp_path / "x.ags").exists()


def test_cli_reports_missing_sample_fields(example_copy: Path, tmp_path: Path,
                                           capsys: pytest.CaptureFixture[str]) -> None:
    defaults = '[stage_defaults.sample]\nlocation_id = "BH03"\nsample_type = "B"\n'
    _edit_project(example_copy, defaults, "[stage_defaults.sample]\n")
    assert main(["export", str(example_copy), "--ags4", str(tmp_path / "x.ags")]) == 2
    err = capsys.readouterr().err
    assert "stage 'BH03-D1': the AGS4 export needs the sample field(s) location_id, sample_type." in err


def test_unknown_sample_type_code_is_refused(example_copy: Path, tmp_path: Path) -> None:
    _edit_project(example_copy, 'sample_type = "B"\n', 'sample_type = "BAG"\n')
    project = load_project(example_copy)
    with pytest.raises(ProjectFileError,
                       match=r"sample_type 'BAG' is not an AGS4 SAMP_TYPE code; use one of .*\bB, BLK\b"):
        write_ags4(project, interpret(project), Interpretation(), tmp_path / "x.ags", DATE)


def test_one_specimen_in_two_test_sets_is_refused(example_copy: Path, tmp_path: Path) -> None:
    _edit_project(example_copy, 'specimen_ref = "L1"\n', 'specimen_ref = "D1"\n')
    project = load_project(example_copy)
    with pytest.raises(ProjectFileError,
                       match=r"stages 'BH03-D1' and 'BH03-L1' share one specimen .* different test sets"):
        write_ags4(project, interpret(project), Interpretation(), tmp_path / "x.ags", DATE)


def test_cli_export_ags4(example_copy: Path, tmp_path: Path) -> None:
    out = tmp_path / "cli.ags"
    assert main(["export", str(example_copy), "--ags4", str(out), "--date", DATE]) == 0
    assert _errors(out) == {}


def test_reversal_tests_export_the_residual(tmp_path: Path) -> None:
    ratios = [0.62, 0.55, 0.45, 0.42, 0.40, 0.40, 0.40]
    stages = {f"R{k}": (reversal_readings(ratios, n, k, taylor_first_pass=False, noise_n=0.3, settlement_mm=0.02),
                        n, "reversal")
              for k, n in enumerate((180.0, 360.0, 720.0), start=1)}
    folder = write_project(tmp_path / "p", stages)
    text = (folder / "project.toml").read_text(encoding="utf-8")
    for k, (_, normal, _) in enumerate(stages.values(), start=1):  # invented sample identification, one per stage
        load = f"force_n = {normal}\n"
        assert text.count(load) == 1
        sample = (f'[stage.sample]\nlocation_id = "TP1"\nsample_top_m = 1.5\nsample_ref = "U{k}"\nsample_type = "U"\n'
                  'specimen_ref = "A"\nspecimen_depth_m = 1.55\ncondition = "undisturbed"\n')
        text = text.replace(load, load + sample)
    (folder / "project.toml").write_text(text, encoding="utf-8")
    project = load_project(folder)
    results = interpret(project)
    path = write_ags4(project, results, Interpretation(), tmp_path / "r.ags", DATE)
    assert _errors(path) == {}
    tables = _read(path)
    shbt, types = tables["SHBT"].set_index("SHBT_TESN"), _types(path, "SHBT")
    for s in results.stages:
        assert s.residual is not None and s.residual.chosen.reached and s.residual.chosen.passes is not None
        row = shbt.loc[s.stage_id]
        travel = sum(p.travel_mm for p in s.passes if p.pass_no <= s.residual.chosen.passes[1])
        for heading, value in (("SHBT_RES", s.residual.chosen.tau_kpa), ("SHBT_RVST", s.residual.chosen.sigma_kpa),
                               ("SHBT_RDIS", travel), ("SHBT_REVS", len(s.passes))):
            assert row[heading] == pytest.approx(value, abs=_half_unit(value, types[heading])), heading
    res = results.envelope("synthetic", "residual").chosen
    assert res is not None
    gtypes = _types(path, "SHBG")
    for _, row in tables["SHBG"].iterrows():
        assert row["SHBG_RPHI"] == pytest.approx(res.phi_deg, abs=_half_unit(res.phi_deg, gtypes["SHBG_RPHI"]))
        assert row["SHBG_RCOH"] == pytest.approx(res.intercept, abs=_half_unit(res.intercept, gtypes["SHBG_RCOH"]))
        assert "residual: linear regression" in row["SHBG_REM"]
    assert set(tables["SHBG"]["SHBG_COND"]) == {"UNDISTURBED"}


def test_multi_stage_test_is_one_specimen_with_one_row_per_stage(tmp_path: Path) -> None:
    levels, xs, fs, ns = [180.0, 360.0, 720.0], [], [], []
    for k, n in enumerate(levels):  # invented readings: each load shears 4 mm further, then the load is raised
        m = Model(normal_n=n, psi_max=0.0, u_mob=0.3, slack=0.0, noise_n=0.3, seed=10 + k)
        x = np.linspace(4.0 * k, 4.0 * (k + 1), 1001)
        xs.append(x)
        fs.append(m.ratio(x - 4.0 * k) * n)
        ns.append(np.full(len(x), n))
        if k < len(levels) - 1:
            ramp = np.linspace(n, levels[k + 1], 22)[1:-1]
            xs.append(np.full(len(ramp), x[-1]))
            fs.append(np.full(len(ramp), fs[-1][-1]))
            ns.append(ramp)
    x, f, n_all = np.concatenate(xs), np.concatenate(fs), np.concatenate(ns)
    rng = np.random.default_rng(3)
    cols = {"t": np.arange(len(x)) * 2.0, "x": x, "y": np.zeros(len(x)), "f": f + rng.normal(0, 0.3, len(x)),
            "n": n_all + rng.normal(0, 0.5, len(x))}
    folder = write_project(tmp_path / "p", {"M1": (cols, 180.0, "multi-stage")}, normal_column=True)
    sample = ('[stage.sample]\nlocation_id = "BH7"\nsample_top_m = 6.0\nsample_ref = "U4"\nsample_type = "U"\n'
              'specimen_ref = "1"\nspecimen_depth_m = 6.05\n')
    _edit_project(folder, "force_n = 180.0\n", "force_n = 180.0\n" + sample)
    project = load_project(folder)
    results = interpret(project)
    path = write_ags4(project, results, Interpretation(), tmp_path / "m.ags", DATE)
    assert _errors(path) == {}
    tables = _read(path)
    assert len(tables["SHBG"]) == 1 and list(tables["SHBT"]["SHBT_TESN"]) == ["M1/1", "M1/2", "M1/3"]
    nominal = sorted(tables["SHBT"]["SHBT_NORM"])
    assert nominal == [pytest.approx(level / 3.6, abs=0.5 + 0.01 * level / 3.6) for level in levels]  # N / 3600 mm2
