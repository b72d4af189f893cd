"""CSV tables of the results (export_tables.py): they parse back and carry the results' numbers."""

from __future__ import annotations

import csv
import math
from pathlib import Path

import pandas as pd
import pytest
from conftest import EXAMPLE
from scipy import stats

from kernels_helpers.cli import main
from kernels_helpers.decisions import Cohesion
from kernels_helpers.export_tables import (
    ENVELOPE_COLUMNS,
    SENSITIVITY_COLUMNS,
    STAGE_COLUMNS,
    write_tables,
)
from kernels_helpers.interpretation import load_interpretation
from kernels_helpers.pipeline import interpret
from kernels_helpers.results import Results


@pytest.fixture(scope="module")
def results() -> Results:
    return interpret(EXAMPLE)


@pytest.fixture(scope="module")
def tables(results: Results, tmp_path_factory: pytest.TempPathFactory) -> dict[str, pd.DataFrame]:
    folder = tmp_path_factory.mktemp("tables")
    paths = write_tables(results, folder)
    assert [p.name for p in paths] == ["stages.csv", "envelopes.csv", "sensitivity.csv"]
    # round_trip: pandas' default C parser may differ from Python's float() in the last bit
    return {p.stem: pd.read_csv(p, keep_default_na=False, na_values=[""], float_precision="round_trip") for p in paths}


def test_headers_are_the_documented_columns(tables: dict[str, pd.DataFrame]) -> None:
    assert tuple(tables["stages"].columns) == STAGE_COLUMNS
    assert tuple(tables["envelopes"].columns) == ENVELOPE_COLUMNS
    assert tuple(tables["sensitivity"].columns) == SENSITIVITY_COLUMNS


def test_stage_rows_carry_the_results_numbers_exactly(results: Results, tables: dict[str, pd.DataFrame]) -> None:
    df = tables["stages"].set_index("id")
    assert list(df.index) == [s.stage_id for s in results.stages]
    for s in results.stages:
        row = df.loc[s.stage_id]
        # floats are written at full precision: exact equality after the text round trip
        assert row["peak_tau_kpa"] == s.peak.chosen.tau_kpa and row["peak_sigma_kpa"] == s.peak.chosen.sigma_kpa
        assert row["peak_x_mm"] == s.peak.chosen.x_mm and row["suggested_peak_x_mm"] == s.peak.suggested.x_mm
        cs = s.critical_state.chosen
        assert row["cs_tau_kpa"] == cs.tau_kpa and row["cs_tau_sd_kpa"] == cs.tau_sd_kpa
        assert row["cs_x_from_mm"] == cs.x_from_mm and row["cs_x_to_mm"] == cs.x_to_mm
        assert row["cs_e"] == s.critical_state.chosen.e and row["cs_dydx"] == s.critical_state.chosen.dydx
        assert row["sigma_nominal_kpa"] == s.sigma_nominal_kpa
        assert row["peak_phi_secant_deg"] == math.degrees(math.atan(s.peak.chosen.ratio))
        assert bool(row["included"]) is s.included and row["peak_source"] == s.peak.source
        assert (row["no_distinct_peak"] if isinstance(row["no_distinct_peak"], str) else None) == s.no_distinct_peak
        assert str(row["flags"]).split(" | ") == list(s.flags)
    assert set(df["peak_source"]) == {"suggested", "manual"}  # the example has a manual pick (BH03-D2)


def test_envelope_rows_match_the_fits_and_scipy(results: Results, tables: dict[str, pd.DataFrame]) -> None:
    env = tables["envelopes"]
    assert len(env) == 2 * len(results.envelopes)
    for e in results.envelopes:
        for form, fit in (("free", e.free), ("origin", e.origin)):
            row = env[(env["group"] == e.group) & (env["kind"] == e.kind) & (env["fit"] == form)].iloc[0]
            assert bool(row["reported"]) is ((e.reported is Cohesion.ORIGIN) == (form == "origin"))
            if fit is None:
                assert math.isnan(row["phi_deg"]) and row["not_fitted"]
                continue
            assert row["n"] == fit.n and row["phi_deg"] == fit.phi_deg and row["c_kpa"] == fit.intercept
            assert (row["phi_ci_low_deg"], row["phi_ci_high_deg"]) == fit.phi_interval_deg
            assert (row["c_ci_low_kpa"], row["c_ci_high_kpa"]) == fit.c_interval_kpa
            assert row["r2"] == fit.r2 and row["residual_sd_kpa"] == fit.residual_sd
    # the stage table alone reproduces the dense peak envelope: scipy.stats.linregress (outside reference)
    st = tables["stages"]
    dense = st[(st["test_set"] == "BH03 dense") & st["included"]]
    lr = stats.linregress(dense["peak_sigma_kpa"], dense["peak_tau_kpa"])
    row = env[(env["group"] == "BH03 dense") & (env["kind"] == "peak") & (env["fit"] == "free")].iloc[0]
    assert row["phi_deg"] == pytest.approx(math.degrees(math.atan(lr.slope)), abs=1e-9)
    assert row["c_kpa"] == pytest.approx(lr.intercept, abs=1e-9)
    assert row["r2"] == pytest.approx(lr.rvalue**2, abs=1e-12)


def test_sensitivity_rows(results: Results, tables: dict[str, pd.DataFrame]) -> None:
    sens = tables["sensitivity"]
    assert len(sens) == len(results.sensitivity) > 0
    for (_, row), r in zip(sens.iterrows(), results.sensitivity, strict=True):
        assert (row["group"], row["kind"], row["left_out"], row["n_left"]) == (r.group, r.kind, r.left_out, r.n_left)
        for col in ("phi_deg", "c_kpa", "phi_change_deg", "phi_origin_deg"):
            value = getattr(r, col)
            assert math.isnan(row[col]) if value is None else row[col] == value


def test_exclusion_reason_with_commas_and_quotes_round_trips(example_copy: Path, tmp_path: Path) -> None:
    reason = 'specimen disturbed, lid "tilted" (see note)'
    interp = load_interpretation(example_copy / "interpretation.json").excluded("BH03-L2", reason, "A. Checker")
    paths = write_tables(interpret(example_copy, interp), tmp_path / "t")
    with paths[0].open(encoding="utf-8", newline="") as f:
        rows = {r["id"]: r for r in csv.DictReader(f)}
    assert rows["BH03-L2"]["included"] == "False" and rows["BH03-L2"]["exclusion_reason"] == reason
    assert rows["BH03-L1"]["included"] == "True" and rows["BH03-L1"]["exclusion_reason"] == ""


def test_cli_export_csv(example_copy: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["export", str(example_copy), "--csv", str(tmp_path / "out")]) == 0
    names = sorted(p.name for p in (tmp_path / "out").iterdir())
    assert names == ["envelopes.csv", "sensitivity.csv", "stages.csv"]
    assert len(pd.read_csv(tmp_path / "out" / "stages.csv")) == 6
    assert capsys.readouterr().out.count(".csv") == 3


def test_cli_export_needs_a_target(example_copy: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["export", str(example_copy)]) == 2
    assert capsys.readouterr().err == (
        "shearbook: error: export: say what to write: --csv FOLDER (CSV tables), --ags4 FILE (AGS4 file), or both.\n")
