"""Units, the project file and the readings files: conversions and error messages."""

from __future__ import annotations

import hashlib
import re
import shutil
from pathlib import Path

import numpy as np
import pytest

from kernels_helpers.errors import ProjectFileError, ReadingsError, ShearbookError, UnitError
from kernels_helpers.project import load_project
from kernels_helpers.readings import read_stage
from kernels_helpers.units import to_canonical_factor

DATA = Path(__file__).parent / "data"

# --- units ------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("unit", "quantity", "factor"),
    [
        ("kN", "shear_force", 1000.0),  # SI prefix kilo, common practice
        (" KN ", "normal_force", 1000.0),  # spelling is case- and space-insensitive (same unit)
        ("lbf", "shear_force", 4.4482216152605),  # exact by definition: 0.45359237 kg x 9.80665 m/s2
        ("lbf", "shear_force", 0.45359237 * 9.80665),  # computed from the avoirdupois pound and g_n
        ("kgf", "normal_force", 9.80665),  # exact by definition, standard gravity (CGPM 1901)
        ("in", "horizontal_displacement", 25.4),  # exact by definition, international inch (1959)
        ("min", "time", 60.0),  # definition of the minute
        ("psi", "shear_stress", 4.4482216152605 / 25.4**2 * 1000.0),  # computed: lbf / in2 in kPa
        ("psi", "normal_stress", 6.894757),  # exact from lbf and in definitions, 6.894757 kPa to 7 figures
    ],
)
def test_to_canonical_factor(unit: str, quantity: str, factor: float) -> None:
    assert to_canonical_factor(unit, quantity, "here") == pytest.approx(factor, rel=5e-8)


def test_unknown_unit_message() -> None:
    with pytest.raises(UnitError, match=re.escape("here: unknown unit 'furlong'. Use one of: ")) as info:
        to_canonical_factor("furlong", "horizontal_displacement", "here")
    assert "mm" in str(info.value) and "lbf" in str(info.value)
    assert isinstance(info.value, ValueError) and isinstance(info.value, ShearbookError)


def test_wrong_dimension_message() -> None:
    expected = "here: unit 'kPa' is a stress unit but time needs a time unit (canonical s)."
    with pytest.raises(UnitError, match=re.escape(expected)):
        to_canonical_factor("kPa", "time", "here")


# --- the project file -------------------------------------------------------------------------

TOML = """\
schema = "shearbook.project/1"
[project]
name = "tmp"
[[stage]]
id = "S1"
file = "readings/S1.csv"
[stage.specimen]
shape = "square"
side_mm = 60.0
height_mm = 20.0
dry_mass_g = 120.0
gs = 2.65
[stage.normal_load]
force_n = 360.0
[stage.columns]
time = { column = "t (s)", unit = "s" }
horizontal_displacement = { column = "x (mm)", unit = "mm" }
vertical_displacement = { column = "y (mm)", unit = "mm", dilation = "positive" }
shear_force = { column = "F (N)", unit = "N" }
"""
HEADER = "t (s),x (mm),y (mm),F (N)"
ROWS = [f"{2 * i},{0.1 * i:.3f},{0.002 * i:.4f},{20.0 * i:.2f}" for i in range(12)]  # test input


def _write(root: Path, toml: str = TOML, lines: list[str] | None = None, raw: bytes | None = None) -> Path:
    (root / "readings").mkdir(exist_ok=True)
    (root / "project.toml").write_text(toml, encoding="utf-8")
    data = raw if raw is not None else ("\n".join(lines if lines is not None else [HEADER, *ROWS]) + "\n").encode()
    (root / "readings" / "S1.csv").write_bytes(data)
    return root


def test_missing_project_file(tmp_path: Path) -> None:
    path = tmp_path.resolve() / "project.toml"
    with pytest.raises(ProjectFileError, match=re.escape(f"{path}: no project file here.")):
        load_project(tmp_path)


def test_bad_toml(tmp_path: Path) -> None:
    _write(tmp_path, toml='schema = "shearbook.project/1"\n[[stage]\n')
    with pytest.raises(ProjectFileError, match=re.escape(f"{tmp_path.resolve() / 'project.toml'}: not valid TOML")):
        load_project(tmp_path)


DUPLICATE = TOML + TOML.split("[[stage]]")[1].join(["[[stage]]", ""])

BAD_FIELDS = [
    (
        ('"shearbook.project/1"', '"shearbook.project/9"'),
        ["schema must be 'shearbook.project/1', found 'shearbook.project/9'"],
    ),
    (("height_mm = 20.0\n", ""), ["stage 'S1' specimen: field 'height_mm' is missing"]),
    (('file = "readings/S1.csv"\n', ""), ["stage 'S1': field 'file' is missing"]),
    (('id = "S1"\n', ""), ["stage 1: field 'id' is missing"]),
    (("side_mm = 60.0", "side_mm = -60.0"), ['stage "S1".specimen.side_mm: found -60.0; allowed: a number > 0.0']),
    (("gs = 2.65", 'gs = "heavy"'), ['stage "S1".specimen.gs: Input should be a valid number (found "heavy")']),
    (('shape = "square"', 'shape = "hexagonal"'),
     ['stage "S1".specimen.shape: found "hexagonal"; allowed: \'square\' or \'circular\'']),
    (("gs = 2.65", "gs = nan"), ['stage "S1".specimen.gs: Input should be a finite number (found NaN)']),
    (("side_mm = 60.0", "side_mm = inf"), ['stage "S1".specimen.side_mm: Input should be a finite number']),
    (("side_mm = 60.0", "side_mm = true"),
     ['stage "S1".specimen.side_mm: Input should be a valid number (found true)']),
    (("gs = 2.65", "gs = 2.65\nrelative_densty = 0.6"),
     ['stage "S1".specimen.relative_densty: unknown key \'relative_densty\'; did you mean relative_density?']),
    (('id = "S1"', 'id = "S1"\ntest_type = "reversal "'),
     ['stage "S1".test_type: found "reversal "; allowed: \'single-stage\', \'multi-stage\' or \'reversal\'']),
    (('id = "S1"', 'id = "S1 "'), ["stage id 'S1 ' begins or ends with a space; write it as 'S1'"]),
    (
        ("force_n = 360.0", "force_n = 360.0\nstress_kpa = 100.0"),
        ["normal_load: give exactly one of", "found ['force_n', 'stress_kpa']"],
    ),
    (
        ('shear_force = { column = "F (N)", unit = "N" }', 'pore_pressure = { column = "u", unit = "kPa" }'),
        ['stage "S1".columns.pore_pressure: unknown key \'pore_pressure\'; known keys here: horizontal_displacement, '
         "normal_force, normal_stress, shear_force, shear_stress, time, vertical_displacement"],
    ),
    (
        (', dilation = "positive"', ""),
        ["stage 'S1' columns.vertical_displacement: say which way", "Shearbook never guesses it."],
    ),
    ((', dilation = "positive"', ', dilation = "up"'),
     ['stage "S1".columns.vertical_displacement.dilation: found "up"; allowed: \'positive\' or \'negative\'']),
    (
        ('unit = "s" }', 'unit = "fortnight" }'),
        ["stage 'S1' columns.time (readings/S1.csv): unknown unit 'fortnight'"],
    ),
    (
        ('unit = "s" }', 'unit = "kN" }'),
        ["columns.time (readings/S1.csv): unit 'kN' is a force unit but time needs a time unit"],
    ),
    (
        ('shear_force = { column = "F (N)", unit = "N" }\n', ""),
        ["columns: the column map lacks shear_force (or shear_stress)"],
    ),
    # time may be left out (a hand-logged sheet: the rate check is then "not possible"); displacement may not
    (('horizontal_displacement = { column = "x (mm)", unit = "mm" }\n', ""),
     ["columns: the column map lacks horizontal_displacement."]),
    ((TOML, DUPLICATE), ["stage ids must be unique; repeated: S1."]),
]


@pytest.mark.parametrize(("edit", "parts"), BAD_FIELDS, ids=[p[0][:40] for _, p in BAD_FIELDS])
def test_project_file_errors(tmp_path: Path, edit: tuple[str, str], parts: list[str]) -> None:
    old, new = edit
    assert old in TOML  # the edit must apply, or the test would pass for the wrong reason
    _write(tmp_path, toml=TOML.replace(old, new, 1))
    with pytest.raises(ProjectFileError, match=re.escape(parts[0])) as info:
        load_project(tmp_path)
    message = str(info.value)
    assert message.startswith(f"{tmp_path.resolve() / 'project.toml'}:")  # names the file
    for part in parts:
        assert part in message


def test_valid_project_loads(tmp_path: Path) -> None:
    stage = load_project(_write(tmp_path)).stage("S1")
    assert stage.file == (tmp_path / "readings" / "S1.csv").resolve()
    assert stage.normal_load.force_n == 360.0  # force_n as written in the file, already in N
    assert stage.columns["vertical_displacement"].dilation_positive


# --- readings files ---------------------------------------------------------------------------


def test_decimal_comma_semicolon_and_downward_gauge() -> None:
    # hand-written fixture tests/data/comma_semicolon: expected values are the file's own numbers
    stage = load_project(DATA / "comma_semicolon").stage("C1")
    table = read_stage(stage).table
    assert table["time_s"].tolist()[:4] == pytest.approx([0.0, 30.0, 60.0, 90.0])  # min x 60
    assert table["x_mm"].tolist()[-3:] == pytest.approx([2.2, 2.6, 3.0])
    # the dial gauge reads down on dilation (dilation = "negative"): Shearbook flips its sign
    assert table["y_mm"].tolist()[:4] == pytest.approx([0.0, -0.002, -0.004, -0.005])
    assert table["y_mm"].iloc[-1] == pytest.approx(0.055)
    assert table["shear_force_n"].tolist()[:3] == pytest.approx([0.0, 10.0, 40.0])  # kN x 1000
    assert len(table) == 15


def test_units_applied_on_read(tmp_path: Path) -> None:
    toml = TOML.replace('unit = "s" }', 'unit = "min" }')
    toml = toml.replace('column = "x (mm)", unit = "mm"', 'column = "x (mm)", unit = "in"')
    readings = read_stage(load_project(_write(tmp_path, toml=toml)).stage("S1"))
    expected_x = np.array([0.1 * i for i in range(12)]) * 25.4  # exact inch, by definition
    np.testing.assert_allclose(readings.table["x_mm"], expected_x, rtol=1e-12)
    np.testing.assert_allclose(readings.table["time_s"], np.arange(12) * 2 * 60.0, rtol=1e-12)


def test_missing_column_lists_the_header(tmp_path: Path) -> None:
    _write(tmp_path, lines=["t (s),x (mm),y (mm),Force (N)", *ROWS])
    path = (tmp_path / "readings" / "S1.csv").resolve()
    expected = (
        f"{path}: column(s) 'F (N)' named in the column map are not in the header (line 1). "
        "Header has: 't (s)', 'x (mm)', 'y (mm)', 'Force (N)'."
    )
    with pytest.raises(ReadingsError, match=re.escape(expected)):
        read_stage(load_project(tmp_path).stage("S1"))


@pytest.mark.parametrize(
    ("preamble", "blank_after", "bad_row", "bad_value"),
    [
        (0, [], 0, "abc"),
        (0, [], 7, "1.2.3"),
        (2, [], 4, "n/a"),
        (3, [], 11, ""),
        (0, [2, 5], 8, "abc"),  # blank lines within the data: the parser skips them
        (2, [0, 9], 10, "--"),
    ],
)
def test_non_numeric_value_names_the_real_line(
    tmp_path: Path, preamble: int, blank_after: list[int], bad_row: int, bad_value: str
) -> None:
    rows = list(ROWS)
    fields = rows[bad_row].split(",")
    fields[1] = bad_value
    rows[bad_row] = ",".join(fields)
    body = [f"preamble line {i + 1}, free text" for i in range(preamble)] + [HEADER]
    for i, row in enumerate(rows):
        body.append(row)
        if i in blank_after:
            body.append("")
    toml = TOML.replace("[stage.columns]", f'[stage.csv]\nheader_row = {preamble}\nuntidy_rows = "refuse"\n'
                                           "[stage.columns]")
    _write(tmp_path, toml=toml, lines=body)
    path = tmp_path.resolve() / "readings" / "S1.csv"
    # the 1-based line a person sees in an editor, counted from the file itself
    line = path.read_text(encoding="utf-8").split("\n").index(rows[bad_row]) + 1
    expected = f"{path}, line {line}, column 'x (mm)': {bad_value!r} is not a number (1 such value(s) in this column)."
    with pytest.raises(ReadingsError, match=re.escape(expected)):
        read_stage(load_project(tmp_path).stage("S1"))


def test_first_data_line(tmp_path: Path) -> None:
    toml = TOML.replace("[stage.columns]", "[stage.csv]\nheader_row = 2\n[stage.columns]")
    _write(tmp_path, toml=toml, lines=["lab", "", HEADER, "", *ROWS])
    assert read_stage(load_project(tmp_path).stage("S1")).first_data_line == 5  # line 4 is blank


def test_raw_file_unchanged_and_hashed(tmp_path: Path) -> None:
    src = DATA / "comma_semicolon"
    shutil.copytree(src, tmp_path / "p")
    path = tmp_path / "p" / "readings" / "C1.csv"
    before = path.read_bytes()
    mtime = path.stat().st_mtime_ns
    readings = read_stage(load_project(tmp_path / "p").stage("C1"))
    assert path.read_bytes() == before
    assert path.stat().st_mtime_ns == mtime
    assert readings.sha256 == hashlib.sha256(before).hexdigest()
    assert readings.size_bytes == len(before)
    assert readings.relpath == "readings/C1.csv"


@pytest.mark.parametrize(
    ("raw", "message"),
    [
        ((HEADER + "\n" + "\n".join(ROWS[:5]) + "\n").encode(), "only 5 data rows; a shear stage needs many more"),
        (
            (HEADER + "\n" + "\n".join(ROWS) + "\n0,1,2,\xe9\n").encode("latin-1"),
            "cannot be decoded as utf-8-sig (byte ",
        ),
    ],
)
def test_unreadable_readings(tmp_path: Path, raw: bytes, message: str) -> None:
    _write(tmp_path, raw=raw)
    path = tmp_path.resolve() / "readings" / "S1.csv"
    with pytest.raises(ReadingsError, match=re.escape(f"{path}: {message}")):
        read_stage(load_project(tmp_path).stage("S1"))


def test_missing_readings_file(tmp_path: Path) -> None:
    _write(tmp_path)
    (tmp_path / "readings" / "S1.csv").unlink()
    path = tmp_path.resolve() / "readings" / "S1.csv"
    with pytest.raises(ReadingsError, match=re.escape(f"{path}: readings file of stage 'S1' not found.")):
        read_stage(load_project(tmp_path).stage("S1"))
