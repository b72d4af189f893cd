"""`shearbook import`: layouts, encodings, units and workbooks in; a project whose readings match out.

The reference for every guessed column map is a map written by hand for the same file (the
example project's project.toml, the comma/semicolon fixture) or the numbers written into the
file by the test itself.
"""

from __future__ import annotations

import hashlib
import re
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from kernels_helpers.cli import main
from kernels_helpers.errors import ImportFolderError
from kernels_helpers.importer import ImportOptions, import_folder
from kernels_helpers.project import load_project
from kernels_helpers.readings import read_consolidation, read_stage
from kernels_helpers.sniff import parse_header

REPO = Path(__file__).resolve().parent.parent
EXAMPLE = REPO / "example_project"
FIXTURE = Path(__file__).parent / "data" / "comma_semicolon"
SPEC_HEAD = "file,id,shape,side_mm,height_mm,dry_mass_g,gs,force_n,dilation"


def _table(path: Path, rows: list[str], head: str = SPEC_HEAD) -> Path:
    path.write_text("\n".join([head, *rows]) + "\n", encoding="utf-8")
    return path


def _digests(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


def _rows(n: int = 30) -> list[tuple[float, float, float, float]]:
    return [(10.0 * i, 0.05 * i, 0.001 * i, 2.0 * min(i, 12)) for i in range(n)]


def test_example_readings_and_fixture_import_like_their_hand_written_maps(tmp_path: Path) -> None:
    lab = tmp_path / "lab"
    lab.mkdir()
    for src in (EXAMPLE / "readings" / "BH03-D1.csv", FIXTURE / "readings" / "C1.csv"):
        (lab / src.name).write_bytes(src.read_bytes())
    before = _digests(lab)
    table = _table(tmp_path / "spec.csv", ["BH03-D1.csv,BH03-D1,square,60,20,120.8,2.65,180,negative",
                                           "C1.csv,C1,square,60,20,120,2.65,360,negative"])
    project = load_project(import_folder(lab, table, tmp_path / "proj"))
    assert _digests(lab) == before  # the source folder is only read
    assert _digests(tmp_path / "proj" / "readings") == before  # copied byte for byte
    for theirs, stage_id in ((load_project(EXAMPLE), "BH03-D1"), (load_project(FIXTURE), "C1")):
        ours = read_stage(project.stage(stage_id)).table
        pd.testing.assert_frame_equal(ours, read_stage(theirs.stage(stage_id)).table)


def test_original_units_kept_and_converted_on_read(tmp_path: Path) -> None:
    lab = tmp_path / "lab"
    lab.mkdir()
    lines = ["Lab XYZ, shear box 2 (invented)", "operator: A. N. Other", "",
             "Time [min]\tHoriz. displacement [in]\tVertical dial (in)\tShear force [lbf]\tNormal stress (psi)"]
    lines += [f"{t / 60:.4f}\t{x / 25.4:.6f}\t{y / 25.4:.6f}\t{f:.3f}\t14.5" for t, x, y, f in _rows()]
    (lab / "S1.tsv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    table = _table(tmp_path / "spec.csv", ["S1.tsv,S1,circular,63.5,19,95.2,2.68,300,positive"],
                   SPEC_HEAD.replace("side_mm", "diameter_mm"))
    root = import_folder(lab, table, tmp_path / "proj")
    raw = tomllib.loads((root / "project.toml").read_text(encoding="utf-8"))
    cols = raw["stage"][0]["columns"]
    assert cols["horizontal_displacement"] == {"column": "Horiz. displacement [in]", "unit": "in"}
    assert cols["shear_force"]["unit"] == "lbf" and cols["normal_stress"]["unit"] == "psi"
    assert raw["stage"][0]["csv"]["delimiter"] == "\t" and raw["stage"][0]["csv"]["header_row"] == 3
    t = read_stage(load_project(root).stage("S1")).table
    rows = np.array(_rows())
    np.testing.assert_allclose(t["time_s"], rows[:, 0], atol=0.01)  # written in minutes to 4 decimals
    np.testing.assert_allclose(t["x_mm"], rows[:, 1], atol=1e-4)
    np.testing.assert_allclose(t["shear_force_n"], rows[:, 3] * 4.4482216152605, rtol=1e-12)  # lbf, exact definition
    np.testing.assert_allclose(t["normal_stress_nominal_kpa"], 14.5 * 6.894757, rtol=1e-6)  # psi, exact definition


@pytest.mark.parametrize("encoding", ["utf-8-sig", "utf-8", "latin-1"])
def test_encodings_and_units_with_micro_sign(tmp_path: Path, encoding: str) -> None:
    lab = tmp_path / "lab"
    lab.mkdir()
    lines = ["Prüfstelle Süd; Versuch 7 (invented)",
             "Zeit time (s);Weg horizontal x (mm);Vertical gauge (µm);Shear load (kN);Temperatur (°C)"]
    lines += [f"{t:.1f};{x:.3f};{y * 1000:.1f};{f / 1000:.4f};21,5".replace(".", ",") for t, x, y, f in _rows()]
    (lab / "S1.csv").write_bytes("\n".join(lines).encode(encoding) + b"\n")
    root = import_folder(lab, _table(tmp_path / "spec.csv", ["S1.csv,S1,square,60,20,120,2.65,360,positive"]),
                         tmp_path / "proj")
    stage = load_project(root).stage("S1")
    assert stage.csv.decimal == "," and stage.csv.delimiter == ";"
    assert stage.csv.encoding == ("latin-1" if encoding == "latin-1" else "utf-8-sig")
    assert stage.columns["vertical_displacement"].unit == "µm"
    t = read_stage(stage).table
    np.testing.assert_allclose(t["y_mm"], np.array(_rows())[:, 2], atol=1e-6)  # micrometres / 1000
    assert "Temperatur (°C)" not in {c.column for c in stage.columns.values()}  # not a quantity: ignored


def test_xlsx_workbook_imported_and_read(tmp_path: Path) -> None:
    openpyxl = pytest.importorskip("openpyxl")
    lab = tmp_path / "lab"
    lab.mkdir()
    book = openpyxl.Workbook()
    ws = book.active
    ws.append(["Invented laboratory - shear box readings"])
    ws.append([])
    ws.append(["Time (s)", "Horizontal displacement (mm)", "Vertical displacement (mm)", "Shear force (N)"])
    for row in _rows():
        ws.append(list(row))
    book.save(lab / "S1.xlsx")
    root = import_folder(lab, _table(tmp_path / "spec.csv", ["S1.xlsx,S1,square,60,20,120,2.65,360,positive"]),
                         tmp_path / "proj")
    stage = load_project(root).stage("S1")
    assert stage.csv.format == "xlsx" and stage.csv.header_row == 2
    readings = read_stage(stage)
    np.testing.assert_allclose(readings.table.to_numpy(), np.array(_rows()), rtol=1e-14)  # written above (15 digits)
    assert readings.first_data_line == 4  # sheet row of the first data row


def test_consolidation_file_and_zero_offset(tmp_path: Path) -> None:
    lab = tmp_path / "lab"
    lab.mkdir()
    body = "\n".join(",".join(map(str, r)) for r in _rows())
    (lab / "S1.csv").write_text("t (s),x (mm),y (mm),Shear force (N)\n" + body + "\n")
    (lab / "S1-cons.csv").write_text("Elapsed time (min),Settlement (mm)\n" +
                                     "\n".join(f"{i * 0.5},{0.01 * i}" for i in range(12)) + "\n")
    head = SPEC_HEAD + ",consolidation_file,consolidation_dilation,vertical_displacement_zero"
    row = "S1.csv,S1,square,60,20,120,2.65,360,positive,S1-cons.csv,negative,0.5"
    table = _table(tmp_path / "spec.csv", [row], head)
    stage = load_project(import_folder(lab, table, tmp_path / "proj")).stage("S1")
    assert stage.columns["vertical_displacement"].zero == 0.5
    y = read_stage(stage).table["y_mm"].to_numpy()
    np.testing.assert_allclose(y, np.array(_rows())[:, 2] - 0.5)  # (reading - zero) x 1
    cons = read_consolidation(stage)
    assert cons is not None
    np.testing.assert_allclose(-cons.table["y_mm"], 0.01 * np.arange(12))  # settlement gauge reads down: flipped
    np.testing.assert_allclose(cons.table["time_s"], 30.0 * np.arange(12))  # minutes


def _lab_with(tmp_path: Path, header: str) -> tuple[Path, Path]:
    lab = tmp_path / "lab"
    lab.mkdir()
    width = len(header.split(","))
    body = [",".join(str(v) for v in (list(r) + [1.0] * width)[:width]) for r in _rows()]
    (lab / "S1.csv").write_text("\n".join([header, *body]) + "\n", encoding="utf-8")
    return lab, _table(tmp_path / "spec.csv", ["S1.csv,S1,square,60,20,120,2.65,360,positive"])


AMBIGUOUS = [
    ("t (s),x (mm),y (mm),Shear load (kN),Shear force (N)",
     "more than one column could be shear_force: 'Shear load (kN)', 'Shear force (N)'. "
     "Say it with --column shear_force=\"HEADER\""),
    ("t (s),x (mm),y (mm),Load (kN)", "no column for shear_force or shear_stress among the headers 't (s)', 'x (mm)', "
     "'y (mm)', 'Load (kN)'. Say it with --column shear_force=\"HEADER\""),
    ("Time,x (mm),y (mm),Shear force (N)", "the header 'Time' (time) gives no unit. Say it with --unit time=UNIT"),
    ("t (fortnights),x (mm),y (mm),Shear force (N)", "no column for time among the headers"),
]


@pytest.mark.parametrize(("header", "message"), AMBIGUOUS, ids=["two-shear", "no-shear", "no-unit", "bad-unit"])
def test_ambiguity_names_file_header_candidates_and_the_way_out(tmp_path: Path, header: str, message: str) -> None:
    lab, table = _lab_with(tmp_path, header)
    with pytest.raises(ImportFolderError, match=re.escape(f"{lab.resolve() / 'S1.csv'}: {message}")):
        import_folder(lab, table, tmp_path / "proj")
    assert not (tmp_path / "proj").exists()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []  # no half-made project left


def test_explicit_column_and_unit_resolve_it(tmp_path: Path) -> None:
    lab, table = _lab_with(tmp_path, "Time,x (mm),y (mm),Shear load (kN),Shear force (N)")
    options = ImportOptions(columns={"shear_force": "Shear force (N)"}, units={"time": "min"})
    stage = load_project(import_folder(lab, table, tmp_path / "proj", options)).stage("S1")
    assert stage.columns["shear_force"].column == "Shear force (N)"
    assert stage.columns["time"].unit == "min"


def test_dilation_sense_is_never_guessed(tmp_path: Path) -> None:
    lab, _ = _lab_with(tmp_path, "t (s),x (mm),y (mm),Shear force (N)")
    table = _table(tmp_path / "spec2.csv", ["S1.csv,S1,square,60,20,120,2.65,360"], SPEC_HEAD.rsplit(",", 1)[0])
    expected = (f"{table.resolve()}, line 2, column 'dilation': which way the vertical gauge of S1.csv reads on "
                "dilation is not given. Add a 'dilation' column")
    with pytest.raises(ImportFolderError, match=re.escape(expected)):
        import_folder(lab, table, tmp_path / "proj")
    root = import_folder(lab, table, tmp_path / "proj", ImportOptions(dilation="negative"))
    assert not load_project(root).stage("S1").columns["vertical_displacement"].dilation_positive


def test_existing_output_refused(tmp_path: Path) -> None:
    lab, table = _lab_with(tmp_path, "t (s),x (mm),y (mm),Shear force (N)")
    (tmp_path / "proj").mkdir()
    (tmp_path / "proj" / "notes.txt").write_text("keep me")
    with pytest.raises(ImportFolderError, match="already exists and is not empty"):
        import_folder(lab, table, tmp_path / "proj")
    assert (tmp_path / "proj" / "notes.txt").read_text() == "keep me"


def test_cli_import(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    lab, table = _lab_with(tmp_path, "t (s),x (mm),y (mm),Load (kN)")
    assert main(["import", str(lab), "--specimens", str(table), "-o", str(tmp_path / "bad")]) == 2
    assert "shearbook: error: " in capsys.readouterr().err
    code = main(["import", str(lab), "--specimens", str(table), "-o", str(tmp_path / "proj"),
                 "--column", "shear_force=Load (kN)", "--name", "Invented test"])
    assert code == 0
    assert "Project created" in capsys.readouterr().out
    assert load_project(tmp_path / "proj").name == "Invented test"


@pytest.mark.parametrize(
    ("header", "label", "unit"),
    [
        ("Shear load (kN)", "Shear load", "kN"),
        ("Time [min]", "Time", "min"),
        ("x_mm", "x", "mm"),
        ("Vertical dial (µm)", "Vertical dial", "µm"),
        ("Elapsed time", "Elapsed time", None),
        ("Normal stress, kPa", "Normal stress", "kPa"),
    ],
)
def test_parse_header(header: str, label: str, unit: str | None) -> None:
    assert parse_header(header) == (label, unit)  # common practice: unit in brackets or as the last word


@pytest.mark.parametrize(("mass_kg", "lever"), [(10.0, 1.0), (2.0, 5.0)])
def test_hanger_mass_and_lever_ratio(tmp_path: Path, mass_kg: float, lever: float) -> None:
    lab, _ = _lab_with(tmp_path, "t (s),x (mm),y (mm),Shear force (N)")
    head = "file,id,shape,side_mm,height_mm,dry_mass_g,gs,hanger_mass_kg,lever_ratio,dilation"
    table = _table(tmp_path / "hanger.csv", [f"S1.csv,S1,square,60,20,120,2.65,{mass_kg},{lever},positive"], head)
    stage = load_project(import_folder(lab, table, tmp_path / "proj")).stage("S1")
    # REFERENCES sec. 1 [P, C]: sigma_n = 9810 m / A kPa; 10 kg on 3600 mm2 -> 27.25 kPa (with g_n 9.80665: 27.24)
    assert stage.normal_load.force_n / 3600.0 * 1000.0 == pytest.approx(27.25, abs=0.015)
    assert stage.normal_load.force_n == pytest.approx(10.0 * 9.80665, rel=1e-12)  # m x lever x g_n
