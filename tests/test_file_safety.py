"""Hand-edited files: one schema each, every problem at once, no traceback, and no decision ever lost.

The careless user (typos, wrong types, stage ids that do not exist), the hurried checker (a sign-off
while a workbook is open) and the hostile editor (NaN, Infinity, deep nesting, damaged bytes) each
get a test here. Property tests use hypothesis; the two-writer tests run real separate processes.
"""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import textwrap
import tomllib
from pathlib import Path

import jsonschema
import pytest
from conftest import copy_example
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from kernels_helpers import interpret
from kernels_helpers.cli import main
from kernels_helpers.controller import Controller
from kernels_helpers.errors import InterpretationFileError, ProjectFileError, ShearbookError
from kernels_helpers.file_models import json_schemas
from kernels_helpers.interpretation import Interpretation, StageDecision, load_interpretation
from kernels_helpers.project import load_project
from kernels_helpers.revisions import ConcurrentEditError, save_checked, save_interpretation

REPO = Path(__file__).resolve().parents[1]
EXAMPLE = REPO / "example_project"
SCHEMAS = REPO / "kernels_helpers" / "schemas"


# --- one schema per file -----------------------------------------------------------------------

def test_the_shipped_json_schemas_are_what_the_models_give() -> None:
    # regenerate with: .venv/bin/python -m kernels_helpers.file_models
    for name, schema in json_schemas().items():
        assert json.loads((SCHEMAS / name).read_text(encoding="utf-8")) == schema, name


def test_the_example_files_validate_against_the_shipped_schemas_with_jsonschema() -> None:
    # an editor validates as you type with these files; jsonschema is an independent validator
    project = tomllib.loads((EXAMPLE / "project.toml").read_text(encoding="utf-8"))
    jsonschema.validate(project, json.loads((SCHEMAS / "project.schema.json").read_text(encoding="utf-8")))
    interp = json.loads((EXAMPLE / "interpretation.json").read_text(encoding="utf-8"))
    schema = json.loads((SCHEMAS / "interpretation.schema.json").read_text(encoding="utf-8"))
    jsonschema.validate(interp, schema)
    interp["stages"]["BH03-D2"]["peak"]["x_mmm"] = 1.0
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(interp, schema)


def _typos(root: Path) -> Path:
    toml = root / "project.toml"
    text = toml.read_text(encoding="utf-8")
    for old, new in (("relative_density = 0.85", "relative_densty = 0.85"), ("header_row = 3", "heder_row = 3"),
                     ('test_type = "single-stage"', 'test_type = "single-stage "')):
        assert old in text
        text = text.replace(old, new, 1)
    toml.write_text(text, encoding="utf-8")
    return toml


def test_check_prints_every_problem_at_once(example_copy: Path, capsys: pytest.CaptureFixture[str]) -> None:
    toml = _typos(example_copy)
    assert main(["check", str(example_copy)]) == 2
    out, err = capsys.readouterr()
    assert out == ""
    assert err.splitlines() == [
        f"{toml}: stage_defaults.csv.heder_row: unknown key 'heder_row'; did you mean header_row?",
        f'{toml}: stage "BH03-D1".test_type: found "single-stage "; allowed: \'single-stage\', \'multi-stage\' or '
        "'reversal'",
        f"{toml}: stage \"BH03-D1\".specimen.relative_densty: unknown key 'relative_densty'; did you mean "
        "relative_density?",
        "3 problem(s) found; nothing was changed.",
    ]
    with pytest.raises(ProjectFileError, match=r"3 problem\(s\); fix them and try again"):  # every read refuses
        load_project(example_copy)


def test_check_of_a_clean_project_reads_every_file(example_copy: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["check", str(example_copy)]) == 0
    out = capsys.readouterr().out
    assert out.startswith(f"{example_copy}: no problems found in 14 file(s): project.toml, interpretation.json, ")


def test_check_names_a_damaged_readings_file_and_a_misspelt_stage_id(example_copy: Path,
                                                                     capsys: pytest.CaptureFixture[str]) -> None:
    data = json.loads((example_copy / "interpretation.json").read_text(encoding="utf-8"))
    data["stages"]["bh03-l2 "] = data["stages"].pop("BH03-L2")
    (example_copy / "interpretation.json").write_text(json.dumps(data), encoding="utf-8")
    readings = example_copy / "readings" / "BH03-D3.csv"
    lines = readings.read_bytes().split(b"\n")
    lines[40] = lines[40].replace(b".", b"..", 1)  # a typo in one reading: refused, as this laboratory asks
    toml = example_copy / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace("header_row = 3", 'header_row = 3\nuntidy_rows = "refuse"',
                                                              1), encoding="utf-8")
    readings.write_bytes(b"\n".join(lines))
    assert main(["check", str(example_copy)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert err[0] == (f'{example_copy / "interpretation.json"}: stages["bh03-l2 "]: no stage of that id in the '
                      "project; did you mean 'BH03-L2'?")
    assert err[1] == (f'stage "BH03-D3" readings: {readings}, line 41, column \'Elapsed time (min)\': \'1..2000\' is '
                      "not a number (1 such value(s) in this column). Fix the file's copy or the column map; Shearbook "
                      "never edits raw readings.")
    assert err[-1] == "2 problem(s) found; nothing was changed."


@pytest.mark.parametrize(("bad_id", "nearest"), [("bh03-d1", "BH03-D1"), ("BH03-D1 ", "BH03-D1"),
                                                ("BH03_D1", "BH03-D1"), ("BH03-D9", "BH03-D3")])
def test_a_decision_for_a_stage_that_is_not_in_the_project_is_an_error(example_copy: Path, bad_id: str,
                                                                         nearest: str) -> None:
    # the engineer believes the stage is out; a decision that does nothing must never pass in silence
    interp = Interpretation().with_decision(bad_id, StageDecision(included=False, exclusion_reason="disturbed"))
    with pytest.raises(InterpretationFileError) as info:
        interpret(example_copy, interp)
    assert str(info.value) == ("the interpretation: decisions for 1 stage id(s) that are not in the project (they "
                               "would do nothing); correct the id(s):\n"
                               f'  stages["{bad_id}"]: no stage of that id in the project; did you mean {nearest!r}?')


def test_a_newer_schema_version_is_refused_and_the_file_kept(example_copy: Path) -> None:
    path = example_copy / "interpretation.json"
    data = json.loads(path.read_text(encoding="utf-8"))
    data["schema_version"] = 2
    path.write_text(json.dumps(data), encoding="utf-8")
    before = path.read_bytes()
    with pytest.raises(InterpretationFileError, match="written with schema version 2; this Shearbook reads up to 1"):
        interpret(example_copy)
    assert main(["signoff", str(example_copy), "--state", "draft", "--who", "A"]) == 2
    assert path.read_bytes() == before


def test_a_hand_edited_hash_or_revision_is_refused_in_words(example_copy: Path) -> None:
    path = example_copy / "interpretation.json"
    data = json.loads(path.read_text(encoding="utf-8"))
    data["revision"], data["raw_files"]["readings/BH03-D1.csv"] = -3, "xyz"
    path.write_text(json.dumps(data), encoding="utf-8")
    with pytest.raises(InterpretationFileError) as info:
        load_interpretation(path)
    assert str(info.value).splitlines()[1:] == [
        "  revision: found -3; allowed: a number >= 0",
        '  raw_files["readings/BH03-D1.csv"]: found "xyz"; allowed: a SHA-256, 64 hexadecimal digits 0-9 and a-f '
        "(Shearbook writes it: do not edit it by hand)"]


@pytest.mark.parametrize(("text", "message"), [
    ("[" * 100_000 + "]" * 100_000, "nested too deeply to be an interpretation file"),
    ('{"schema": "shearbook.interpretation/1", "schema_version": 1}'.encode("utf-16").decode("latin-1"), "not UTF-8"),
])
def test_hostile_interpretation_files_are_refused_in_words(example_copy: Path, text: str, message: str,
                                                           capsys: pytest.CaptureFixture[str]) -> None:
    (example_copy / "interpretation.json").write_bytes(text.encode("latin-1"))
    assert main(["results", str(example_copy)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("shearbook: error: ") and message in err and "Traceback" not in err


# --- property tests: damage never escapes as a traceback; visible damage is never silent ------------

JUNK = st.binary(max_size=6) | st.sampled_from([b"NaN", b"Infinity", b"1e400", b"true", b'"x"', b"null", b"-",
                                                b"\x00", b"{", b"]", b",", b"\xff\xfe"])


@st.composite
def damaged(draw: st.DrawFn, source: bytes) -> bytes:
    data = bytearray(source)
    for _ in range(draw(st.integers(1, 4))):
        at = draw(st.integers(0, max(len(data) - 1, 0)))
        op = draw(st.sampled_from(["insert", "delete", "replace", "truncate"]))
        if op == "insert":
            data[at:at] = draw(JUNK)
        elif op == "delete":
            del data[at: at + draw(st.integers(1, 30))]
        elif op == "replace":
            data[at: at + draw(st.integers(1, 8))] = draw(JUNK)
        else:
            del data[at:]
    return bytes(data)


INTERP_TEXT = (EXAMPLE / "interpretation.json").read_bytes()
PROJECT_TEXT = (EXAMPLE / "project.toml").read_bytes()


@settings(max_examples=120, deadline=None, database=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(content=damaged(INTERP_TEXT))
def test_a_damaged_interpretation_file_gives_only_its_own_error(tmp_path_factory: pytest.TempPathFactory,
                                                                content: bytes) -> None:
    path = tmp_path_factory.mktemp("interp") / "interpretation.json"
    path.write_bytes(content)
    try:
        interp = load_interpretation(path)
    except InterpretationFileError as exc:
        assert str(exc).startswith(str(path))
        with pytest.raises(InterpretationFileError):  # and a writer never overwrites what it could not read
            save_interpretation(Interpretation(), path)
        assert path.read_bytes() == content
    else:  # what was read is a valid interpretation: it saves and reads back to the same decisions
        save_interpretation(interp, path)
        assert load_interpretation(path) == interp


@settings(max_examples=120, deadline=None, database=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(content=damaged(PROJECT_TEXT))
def test_a_damaged_project_file_gives_only_its_own_error(tmp_path_factory: pytest.TempPathFactory,
                                                         content: bytes) -> None:
    root = tmp_path_factory.mktemp("proj")
    (root / "project.toml").write_bytes(content)
    (root / "readings").symlink_to(EXAMPLE / "readings")
    try:
        load_project(root)
    except ProjectFileError as exc:
        assert str(exc).startswith(str(root / "project.toml")) and "Traceback" not in str(exc)


READINGS = (EXAMPLE / "readings" / "BH03-L2.csv").read_bytes()


@pytest.fixture(scope="module")
def untouched() -> dict:
    return json.loads(interpret(EXAMPLE).to_json())


@pytest.mark.filterwarnings("ignore::hypothesis.errors.HypothesisWarning")  # a failing example is a whole file
@settings(max_examples=60, deadline=None, database=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(content=damaged(READINGS))
def test_damaged_readings_are_an_error_or_a_stale_flag_never_a_silent_change(
        tmp_path_factory: pytest.TempPathFactory, untouched: dict, content: bytes) -> None:
    root = copy_example(tmp_path_factory.mktemp("readings") / "p")
    (root / "readings" / "BH03-L2.csv").write_bytes(content)
    try:
        now = json.loads(interpret(root).to_json())
    except ShearbookError:
        return
    if content == READINGS:
        assert now["stages"] == untouched["stages"]
        return
    stage = next(s for s in now["stages"] if s["id"] == "BH03-L2")
    # the interpretation holds the SHA-256 of every raw file: any change of the bytes is flagged on the stage
    assert any(f.startswith("raw file readings/BH03-L2.csv changed since the interpretation was saved")
               for f in stage["flags"]), stage["flags"]


# --- no lost update ----------------------------------------------------------------------------

def _exclude(interp: Interpretation, sid: str, who: str) -> Interpretation:
    return interp.excluded(sid, f"set aside by {who}", who)


def test_two_writers_on_different_stages_are_merged_and_say_so(example_copy: Path) -> None:
    path = example_copy / "interpretation.json"
    first, second = load_interpretation(path), load_interpretation(path)
    save_checked(_exclude(first, "BH03-D2", "A. Engineer"), path)
    saved = save_checked(_exclude(second, "BH03-L3", "B. Checker"), path)
    assert saved.merged == ("stage BH03-D2",)
    now = load_interpretation(path)
    assert not now.decision("BH03-D2").included and not now.decision("BH03-L3").included
    assert now.revision == 2


def test_two_writers_on_the_same_stage_the_second_is_refused_and_told_what_changed(example_copy: Path) -> None:
    path = example_copy / "interpretation.json"
    first, second = load_interpretation(path), load_interpretation(path)
    save_checked(_exclude(first, "BH03-D2", "A. Engineer"), path)
    after_first = path.read_bytes()
    with pytest.raises(ConcurrentEditError) as info:
        save_checked(second.with_note("BH03-D2", "looks fine", "B. Checker"), path)
    assert "in the same decision(s) as this save: stage BH03-D2 (by A. Engineer at " in str(info.value)
    assert "Nothing was written: reload the file" in str(info.value)
    assert path.read_bytes() == after_first


def test_a_stale_writer_cannot_undo_a_sign_off(example_copy: Path) -> None:
    path = example_copy / "interpretation.json"
    stale = load_interpretation(path)
    checked = load_interpretation(path).with_signoff("checked", "B. Checker")
    save_checked(checked, path)
    save_checked(stale.with_note("BH03-D1", "edge of the box chipped", "A. Engineer"), path)  # another decision
    now = load_interpretation(path)
    assert now.signoff.state == "checked" and [h["who"] for h in now.signoff.history][-1] == "B. Checker"
    with pytest.raises(ConcurrentEditError):  # the stale writer's own sign-off step clashes with the recorded one
        save_checked(stale.with_signoff("checked", "C. Someone"), path)


def test_workbook_open_while_signoff_runs_keeps_the_signoff_and_its_history(example_copy: Path) -> None:
    live = Controller(example_copy, author="A. Engineer")
    done = subprocess.run([sys.executable, "-m", "kernels_helpers.cli", "signoff", str(example_copy), "--state",
                           "checked", "--who", "B. Checker"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert live.exclude("BH03-L1", "disturbed during trimming")
    assert "also taken from the file, saved meanwhile by another writer: " in live.message
    now = load_interpretation(example_copy / "interpretation.json")
    assert now.signoff.state == "checked" and now.signoff.history[-1]["who"] == "B. Checker"
    assert not now.decision("BH03-L1").included


def test_two_workbooks_on_one_stage_the_second_is_refused_and_can_reload(example_copy: Path) -> None:
    a, b = Controller(example_copy, author="A"), Controller(example_copy, author="B")
    assert a.exclude("BH03-D3", "too fast for drained conditions")
    assert not b.set_note("BH03-D3", "fine to use")
    assert b.message.startswith("not saved: ") and "stage BH03-D3 (by A at " in b.message
    assert "stays on this screen until then" in b.message
    assert b.reload()
    assert "was not saved: make it again if it still applies" in b.message
    assert not b.interpretation.decision("BH03-D3").included  # what A saved is what B now shows


WRITER = textwrap.dedent("""
    import sys
    from kernels_helpers.interpretation import load_interpretation
    from kernels_helpers.revisions import ConcurrentEditError, save_checked
    path, who, stages = sys.argv[1], sys.argv[2], sys.argv[3].split(",")
    for i in range(int(sys.argv[4])):
        for sid in stages:
            interp = load_interpretation(path)
            save_checked(interp.with_note(sid, f"{who} {i}", who), path)
    print("done", flush=True)
""")


def test_two_writer_processes_lose_nothing(example_copy: Path) -> None:
    path = example_copy / "interpretation.json"
    runs = [subprocess.Popen([sys.executable, "-c", WRITER, str(path), who, stages, "10"], stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True)
            for who, stages in (("A", "BH03-D1,BH03-D2,BH03-D3"), ("B", "BH03-L1,BH03-L2,BH03-L3"))]
    for run in runs:
        out, err = run.communicate(timeout=300)
        assert run.returncode == 0 and out == "done\n", err
    now = load_interpretation(path)
    assert {sid: now.decision(sid).note for sid in ("BH03-D1", "BH03-D3", "BH03-L1", "BH03-L3")} == {
        "BH03-D1": "A 9", "BH03-D3": "A 9", "BH03-L1": "B 9", "BH03-L3": "B 9"}
    assert now.revision == 60  # every save counted: none was lost or overwritten


KILLED = textwrap.dedent("""
    import sys
    from kernels_helpers.interpretation import load_interpretation
    from kernels_helpers.revisions import save_checked
    path = sys.argv[1]
    i = 0
    while True:
        i += 1
        save_checked(load_interpretation(path).with_note("BH03-D1", "x" * (i % 997) * 200, "A"), path)
        if i == 3:
            print("saving", flush=True)
""")


def test_a_writer_killed_during_saves_leaves_a_readable_file_and_its_temporaries_are_removed(
        example_copy: Path) -> None:
    path = example_copy / "interpretation.json"
    for _ in range(3):  # bounded: three kills at whatever moment the writer is in
        run = subprocess.Popen([sys.executable, "-c", KILLED, str(path)], stdout=subprocess.PIPE, text=True)
        assert run.stdout is not None and run.stdout.readline() == "saving\n"
        os.kill(run.pid, signal.SIGKILL)
        run.wait(timeout=60)
        load_interpretation(path)  # the old file or the new one, never half of either
    (example_copy / ".interpretation.json.left-by-a-killed-writer.tmp").write_text("{", encoding="utf-8")
    save_checked(load_interpretation(path).with_note("BH03-D2", "after the kills", "B"), path)
    assert sorted(p.name for p in example_copy.iterdir() if p.name.startswith(".interpretation.json")) == []
    assert load_interpretation(path).decision("BH03-D2").note == "after the kills"


# --- no traceback, ever ------------------------------------------------------------------------

def test_an_unexpected_fault_is_one_sentence_and_debug_shows_the_traceback(
        example_copy: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    import kernels_helpers.pipeline as pipeline

    def broken(*args: object, **kwargs: object) -> None:
        raise ZeroDivisionError("float division by zero")

    monkeypatch.setattr(pipeline, "interpret", broken)
    assert main(["results", str(example_copy)]) == 2
    err = capsys.readouterr().err
    assert err == ("shearbook: error: results failed inside Shearbook (ZeroDivisionError: float division by zero). "
                   "Run `shearbook check` on the project; if it finds nothing, this is a fault in Shearbook: "
                   "report it with the output of --debug.\n")
    assert main(["results", str(example_copy), "--debug"]) == 2
    assert "Traceback (most recent call last)" in capsys.readouterr().err


def test_a_numerical_warning_is_an_error_not_a_line_on_the_terminal(
        example_copy: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    import numpy as np

    import kernels_helpers.pipeline as pipeline

    def warns(*args: object, **kwargs: object) -> None:
        np.log(np.zeros(1))  # "divide by zero encountered in log"

    monkeypatch.setattr(pipeline, "interpret", warns)
    assert main(["results", str(example_copy)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("shearbook: error: results: a computation met values it cannot handle (divide by zero ")
    assert "RuntimeWarning" not in err


def test_a_travel_beyond_the_box_is_named_with_its_line(example_copy: Path) -> None:
    # found by the property test above: a damaged displacement of 600 mm in a 60 mm box ended in a traceback
    readings = example_copy / "readings" / "BH03-L2.csv"
    lines = readings.read_text(encoding="utf-8").split("\n")
    cells = lines[2000].split(",")
    cells[1] = "612.5"
    lines[2000] = ",".join(cells)
    readings.write_text("\n".join(lines), encoding="utf-8")
    with pytest.raises(ShearbookError) as info:
        interpret(example_copy)
    assert str(info.value) == (f"{readings}, line 2001: horizontal displacement 612.5 mm reaches the box width 60 mm "
                               "(1 reading(s)): no contact area would be left. Check the unit of the displacement "
                               "column and the box size (side_mm or diameter_mm) in the project file.")


@pytest.mark.parametrize(("pick", "message"), [
    ({"peak": {"source": "manual", "x_mm": 250.0}},
     "stage 'BH03-D2': the manual peak at 250 mm lies outside the curve, which runs from "),
    ({"critical_state": {"source": "manual", "x_from_mm": -5.0, "x_to_mm": 3.0}},
     "stage 'BH03-D2': the manual critical-state window at -5 mm lies outside the curve"),
    ({"critical_state": {"source": "manual", "x_from_mm": 6.0, "x_to_mm": 6.001}},
     "stage 'BH03-D2': the manual critical-state window: window 6.000-6.001 mm holds "),
])
def test_a_manual_pick_off_the_curve_is_an_error_never_snapped_from_afar(example_copy: Path, pick: dict,
                                                                         message: str) -> None:
    # before: a manual peak typed as 250 mm (for 2.50) snapped to the last reading, in silence
    path = example_copy / "interpretation.json"
    data = json.loads(path.read_text(encoding="utf-8"))
    for key, value in pick.items():
        data["stages"]["BH03-D2"][key].update(value)
    path.write_text(json.dumps(data), encoding="utf-8")
    with pytest.raises(InterpretationFileError, match=f"^{re.escape(str(path))}: {re.escape(message)}"):
        interpret(example_copy)


@pytest.fixture(scope="module")
def xlsx_project(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A one-stage project whose readings are an .xlsx workbook (invented rows)."""
    import openpyxl

    from kernels_helpers.importer import import_folder

    lab = tmp_path_factory.mktemp("xlsx") / "lab"
    lab.mkdir()
    book = openpyxl.Workbook()
    ws = book.active
    ws.append(["Time (s)", "Horizontal displacement (mm)", "Vertical displacement (mm)", "Shear force (N)"])
    for i in range(400):
        x = 0.02 * i
        ws.append([6.0 * i, x, 0.3 * (1 - 2.718 ** (-x)) - 0.02 * x, 250.0 * (1 - 2.718 ** (-3 * x)) + 5])
    book.save(lab / "S1.xlsx")
    (lab.parent / "spec.csv").write_text("file,id,shape,side_mm,height_mm,dry_mass_g,gs,force_n,dilation\n"
                                         "S1.xlsx,S1,square,60,20,120,2.65,360,positive\n", encoding="utf-8")
    return import_folder(lab, lab.parent / "spec.csv", lab.parent / "project")


@settings(max_examples=60, deadline=None, database=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_a_damaged_xlsx_gives_only_a_readings_error(xlsx_project: Path, data: st.DataObject) -> None:
    from kernels_helpers.readings import read_stage

    stage = load_project(xlsx_project).stage("S1")
    original = stage.file.read_bytes()
    content = data.draw(damaged(original))
    stage.file.write_bytes(content)
    try:
        read_stage(stage)
    except ShearbookError as exc:
        assert str(exc).startswith(str(stage.file))
    finally:
        stage.file.write_bytes(original)
