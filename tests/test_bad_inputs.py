"""Bad input: a clear ShearbookError naming file, line and column and what to do; no raw file written.

Corpus: tests/data/bad_inputs/ (hand-written, invented numbers; good.csv is the reference). Each
readings case is read twice: through a project file written by hand, and through `import`.
"""

from __future__ import annotations

import hashlib
import re
import shutil
import string
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from kernels_helpers.errors import ShearbookError
from kernels_helpers.importer import import_folder
from kernels_helpers.project import load_project
from kernels_helpers.readings import read_stage
from kernels_helpers.reduce import ReductionSettings, reduce_stage

BAD = Path(__file__).parent / "data" / "bad_inputs"
SPEC = "file,id,shape,side_mm,height_mm,dry_mass_g,gs,force_n,dilation\nS1.csv,S1,square,60,20,120,2.65,360,positive\n"


def _project(tmp_path: Path, readings: str = "good.csv", toml: str = "project_template.toml") -> Path:
    root = tmp_path / "project"
    (root / "readings").mkdir(parents=True)
    shutil.copyfile(BAD / toml, root / "project.toml")
    shutil.copyfile(BAD / readings, root / "readings" / "S1.csv")
    return root


def _lab(tmp_path: Path, readings: str) -> tuple[Path, Path]:
    lab = tmp_path / "lab"
    lab.mkdir()
    shutil.copyfile(BAD / readings, lab / "S1.csv")
    table = tmp_path / "specimens.csv"
    table.write_text(SPEC, encoding="utf-8")
    return lab, table


READINGS_CASES = [  # file, message after "<path>", same message from import (None: as the project's)
    ("empty.csv", ": the file is empty. Ask the laboratory for the readings, or remove this stage.",
     ": the file is empty. Ask the laboratory for the readings, or move the file out of the folder."),
    ("header_only.csv", ": the header (line 1) has no data rows below it. Check csv.header_row or ask the laboratory",
     ": line 1 looks like a header but no data rows follow it. Ask the laboratory for the complete file."),
    ("missing_column.csv", ": column(s) 'y (mm)' named in the column map are not in the header (line 1). Header has: "
     "'t (s)', 'x (mm)', 'Shear force (N)'. Correct the column map",
     ": no column for vertical_displacement among the headers 't (s)', 'x (mm)', 'Shear force (N)'. Say it with "
     "--column vertical_displacement=\"HEADER\""),
    ("decreasing_time.csv", ", line 16, column 't (s)': time goes back from the previous reading (130 s then 50 s; 1 "
     "reading(s) out of order).", None),
]


@pytest.mark.parametrize(("name", "message", "imported"), READINGS_CASES, ids=[c[0] for c in READINGS_CASES])
def test_bad_readings_file(tmp_path: Path, name: str, message: str, imported: str | None) -> None:
    before = hashlib.sha256((BAD / name).read_bytes()).hexdigest()
    root = _project(tmp_path, name)
    path = (root / "readings" / "S1.csv").resolve()
    with pytest.raises(ShearbookError, match=re.escape(f"{path}{message}")):
        read_stage(load_project(root).stage("S1"))
    lab, table = _lab(tmp_path, name)
    with pytest.raises(ShearbookError, match=re.escape(f"{(lab / 'S1.csv').resolve()}{imported or message}")):
        import_folder(lab, table, tmp_path / "imported")
    assert not (tmp_path / "imported").exists()
    assert hashlib.sha256((BAD / name).read_bytes()).hexdigest() == before  # nothing written to a raw file
    assert hashlib.sha256((lab / "S1.csv").read_bytes()).hexdigest() == before


UNTIDY_CASES = [  # file, what csv.untidy_rows = "refuse" says, the flag of the default ("flag")
    ("non_numeric.csv", ", line 11, column 'Shear force (N)': 'broken' is not a number (1 such value(s) in this "
     "column). Fix the file's copy or the column map; Shearbook never edits raw readings.",
     "untidy readings file: 1 row(s) with a blank or non-numeric value in a mapped column left out of the analysis, "
     "first at line(s) 11 of S1.csv; the raw file is unchanged"),
    ("nan_rows.csv", ", line 9, column 't (s)': 'NaN' is not a number (1 such value(s) in this column).",
     "untidy readings file: 1 row(s) with a blank or non-numeric value in a mapped column left out of the analysis, "
     "first at line(s) 9 of S1.csv"),
    ("duplicate_time.csv", ", line 13, column 't (s)': time repeats the previous reading (100 s then 100 s; 1 "
     "reading(s) out of order). Ask the laboratory for a corrected file, or set csv.time_order = \"flag\"",
     "untidy readings file: 1 reading(s) repeating the previous time left out of the analysis, first at line(s) 13 "
     "of S1.csv; the raw file is unchanged"),
]


@pytest.mark.parametrize(("name", "refused", "flag"), UNTIDY_CASES, ids=[c[0] for c in UNTIDY_CASES])
def test_untidy_logger_rows_are_left_out_with_a_flag_or_refused_by_setting(tmp_path: Path, name: str, refused: str,
                                                                          flag: str) -> None:
    root = _project(tmp_path, name)
    stage = load_project(root).stage("S1")
    readings = read_stage(stage)
    assert any(note.startswith(flag) for note in readings.notes), readings.notes
    data_rows = [ln for ln in (BAD / name).read_text(encoding="utf-8").splitlines()[1:] if ln.strip()]
    assert len(readings.table) == len(data_rows) - 1  # the one untidy row is left out, every other row kept
    assert (readings.table["time_s"].diff().dropna() > 0).all()
    toml = root / "project.toml"
    refuse = toml.read_text(encoding="utf-8").replace("[stage.columns]", '[stage.csv]\nuntidy_rows = "refuse"\n'
                                                                         "[stage.columns]")
    toml.write_text(refuse, encoding="utf-8")
    path = (root / "readings" / "S1.csv").resolve()
    with pytest.raises(ShearbookError, match=re.escape(f"{path}{refused}")):
        read_stage(load_project(root).stage("S1"))


@pytest.mark.parametrize(("content", "message"), [
    (b"t (s),x (mm),y (mm),Shear force (N)\n0,0,0,0\n1,0.1,0\x00,5\n", ", line 3: byte b'\\x00' is not text"),
    (b"t (s),x (mm),y (mm),Shear force (N),x (mm)\n" + b"".join(b"%d,%.2f,0,%d,1\n" % (i, 0.1 * i, 10 * i)
                                                              for i in range(40)),
     ", line 1: columns 2 and 5 have the same name 'x (mm)'; the column map cannot tell them apart."),
])
def test_junk_bytes_and_a_repeated_column_name_are_errors_naming_the_line(tmp_path: Path, content: bytes,
                                                                          message: str) -> None:
    root = _project(tmp_path)
    (root / "readings" / "S1.csv").write_bytes(content)
    path = (root / "readings" / "S1.csv").resolve()
    with pytest.raises(ShearbookError, match=re.escape(f"{path}{message}")):
        read_stage(load_project(root).stage("S1"))


PROBLEM = "1 problem(s); fix them and try again:\n  "
PROJECT_CASES = [
    ("project_zero_side.toml", f'{PROBLEM}stage "S1".specimen.side_mm: found 0.0; allowed: a number > 0.0'),
    ("project_negative_height.toml", f'{PROBLEM}stage "S1".specimen.height_mm: found -20.0; allowed: a number > 0.0'),
    ("project_gs_zero.toml", f'{PROBLEM}stage "S1".specimen.gs: G_s, the specific gravity of the soil particles, lies '
                             "between 2.0 and 3.5 (quartz 2.65), not 0.0"),
    ("project_outside.toml", "stage 'S1': file: readings path '../outside/S1.csv' points outside the project folder"),
]


@pytest.mark.parametrize(("toml", "message"), PROJECT_CASES, ids=[c[0] for c in PROJECT_CASES])
def test_bad_project_file(tmp_path: Path, toml: str, message: str) -> None:
    root = _project(tmp_path, toml=toml)
    (tmp_path / "outside").mkdir()
    shutil.copyfile(BAD / "good.csv", tmp_path / "outside" / "S1.csv")  # exists, yet is refused
    with pytest.raises(ShearbookError, match=re.escape(f"{root.resolve() / 'project.toml'}: {message}")) as info:
        load_project(root)
    if "outside" in toml:
        assert "Copy the file into the project folder" in str(info.value)  # what to do


TABLE_CASES = [
    ("specimens_zero_side.csv", "line 2, column 'side_mm': '0' must be positive."),
    ("specimens_negative_height.csv", "line 2, column 'height_mm': '-20' must be positive."),
    ("specimens_gs_zero.csv", "line 2, column 'gs': '0' must be positive."),
]


@pytest.mark.parametrize(("table", "message"), TABLE_CASES, ids=[c[0] for c in TABLE_CASES])
def test_bad_specimen_table(tmp_path: Path, table: str, message: str) -> None:
    lab = tmp_path / "lab"
    lab.mkdir()
    shutil.copyfile(BAD / "good.csv", lab / "good.csv")
    expected = f"{(BAD / table).resolve()}, {message} Correct the specimen table"
    with pytest.raises(ShearbookError, match=re.escape(expected)):
        import_folder(lab, BAD / table, tmp_path / "imported")


def test_good_reference_reads(tmp_path: Path) -> None:
    table = read_stage(load_project(_project(tmp_path)).stage("S1")).table
    assert len(table) == 20 and table["shear_force_n"].iloc[-1] == 24.0  # the numbers in good.csv


def test_large_file_handled(tmp_path: Path) -> None:
    n = 300_000
    t = np.arange(n) * 0.02
    x = t * 12.0 / t[-1]
    lines = ["t (s),x (mm),y (mm),Shear force (N)"]
    lines += [f"{a:.2f},{b:.5f},{0.01 * b:.5f},{300.0 * np.tanh(b):.3f}" for a, b in zip(t, x, strict=True)]
    lab = tmp_path / "lab"
    lab.mkdir()
    (lab / "S1.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (tmp_path / "specimens.csv").write_text(SPEC, encoding="utf-8")
    root = import_folder(lab, tmp_path / "specimens.csv", tmp_path / "project")
    stage = load_project(root).stage("S1")
    readings = read_stage(stage)
    assert readings.lines is None and readings.line(n - 1) == n + 1  # fast path, line numbers still right
    reduced = reduce_stage(stage, readings, ReductionSettings())
    assert len(reduced.curve) == n and not reduced.curve["spike"].any()


# --- property: mangled files give the package's own errors, never a traceback --------------------

GOOD = (BAD / "good.csv").read_bytes()
EXAMPLE_FILE = Path(__file__).resolve().parent.parent / "example_project" / "readings" / "BH03-D1.csv"
SOURCES = [GOOD, EXAMPLE_FILE.read_bytes()[:6000].rsplit(b"\n", 1)[0] + b"\n"]  # whole lines
JUNK = st.binary(max_size=8) | st.text(string.printable + "µ°é;\t", max_size=8).map(lambda s: s.encode("utf-8"))


@st.composite
def mangled(draw: st.DrawFn) -> bytes:
    data = bytearray(draw(st.sampled_from(SOURCES)))
    for _ in range(draw(st.integers(1, 6))):
        op = draw(st.sampled_from(["insert", "delete", "replace", "truncate", "duplicate_line", "swap_lines",
                                   "crlf", "bom", "preamble", "blank_line"]))
        at = draw(st.integers(0, max(len(data) - 1, 0)))
        if op == "insert":
            data[at:at] = draw(JUNK)
        elif op == "delete":
            del data[at : at + draw(st.integers(1, 40))]
        elif op == "replace":
            data[at : at + 1] = draw(JUNK)
        elif op == "truncate":
            del data[at:]
        elif op == "crlf":
            data = bytearray(bytes(data).replace(b"\n", b"\r\n"))
        elif op == "bom":
            data[0:0] = b"\xef\xbb\xbf"
        elif op == "preamble":  # a Latin-1 line of free text above everything
            data[0:0] = "Prüfung 7, Gerät B (invented)\n".encode("latin-1")
        elif op == "blank_line":
            lines = bytes(data).split(b"\n")
            lines.insert(draw(st.integers(0, len(lines))), b"")
            data = bytearray(b"\n".join(lines))
        else:
            lines = bytes(data).split(b"\n")
            i, j = draw(st.integers(0, len(lines) - 1)), draw(st.integers(0, len(lines) - 1))
            if op == "duplicate_line":
                lines.insert(i, lines[j])
            else:
                lines[i], lines[j] = lines[j], lines[i]
            data = bytearray(b"\n".join(lines))
    return bytes(data)


@settings(max_examples=60, deadline=None, database=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(content=mangled(), name=st.sampled_from(["S1.csv", "S1.txt"]))
def test_mangled_files_raise_only_shearbook_errors(tmp_path_factory: pytest.TempPathFactory, content: bytes,
                                                   name: str) -> None:
    tmp = tmp_path_factory.mktemp("mangled")
    lab = tmp / "lab"
    lab.mkdir()
    (lab / name).write_bytes(content)
    (tmp / "specimens.csv").write_text(SPEC.replace("S1.csv", name).replace("positive", "negative"), encoding="utf-8")
    try:
        root = import_folder(lab, tmp / "specimens.csv", tmp / "project")
    except ShearbookError:
        assert not (tmp / "project").exists()
    else:
        stage = load_project(root).stage("S1")
        try:
            reduce_stage(stage, read_stage(stage), ReductionSettings())
        except ShearbookError:
            pass
    assert (lab / name).read_bytes() == content  # the source is never written
