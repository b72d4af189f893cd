"""The interpretation file: round trip, stable text, atomic and safe saves, and its errors."""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import re
from pathlib import Path

import pytest

from kernels_helpers.errors import InterpretationFileError
from kernels_helpers.interpretation import (
    Cohesion,
    FitSettings,
    Interpretation,
    Pick,
    Settings,
    SignOff,
    StageDecision,
    load_interpretation,
)
from kernels_helpers.picks import PickSettings
from kernels_helpers.reduce import ReductionSettings
from kernels_helpers.revisions import save_interpretation


def _full() -> Interpretation:
    """An interpretation that uses every field, with values away from the defaults."""
    return Interpretation(
        stages={
            "S2": StageDecision(included=False, exclusion_reason="specimen disturbed in trimming", note="see sheet"),
            "S1": StageDecision(
                peak=Pick(source="manual", x_mm=2.375, author="A. Engineer", time_utc="2026-01-05T09:00:00Z",
                                note="second maximum"),
                critical_state=Pick(source="manual", x_from_mm=8.0, x_to_mm=11.5, author="A. Engineer",
                                            time_utc="2026-01-05T09:01:00Z", note="steady from 8 mm"),
            ),
        },
        settings=Settings(
            reduction=ReductionSettings(area_convention="nominal", smoothing_window_mm=0.8, seating_fraction=0.03,
                                        peak_smoothing_mm=0.3),
            picks=PickSettings(critical_state_window_mm=3.0, critical_state_rate_tolerance=0.02,
                               critical_state_trend_tolerance=0.03,
                               distinct_peak_margin=0.05),
            fit=FitSettings(cohesion=Cohesion.ORIGIN, level=0.9),
        ),
        raw_files={"readings/S2.csv": "b" * 64, "readings/S1.csv": "a" * 64},
        signoff=SignOff(
            state="checked",
            history=({"state": "checked", "who": "B. Checker", "time_utc": "2026-01-06T10:00:00Z", "note": ""},),
        ),
    )


@pytest.mark.parametrize("make", [Interpretation, _full], ids=["default", "full"])
def test_round_trip(tmp_path: Path, make: type[Interpretation]) -> None:
    original = make()
    path = save_interpretation(original, tmp_path / "interpretation.json")
    loaded = load_interpretation(path)
    assert loaded == original  # the same decisions (the revision is bookkeeping, not a decision)
    assert loaded.revision == 1 and original.revision == 0
    assert loaded.to_json() == dataclasses.replace(original, revision=1).to_json()


def test_stable_text(tmp_path: Path) -> None:
    path = tmp_path / "interpretation.json"
    save_interpretation(_full(), path)
    first = path.read_bytes()
    save_interpretation(load_interpretation(path), path)
    # identical text on re-save, but for the revision, which counts the saves
    assert path.read_bytes() == first.replace(b'"revision": 1,', b'"revision": 2,')
    text = first.decode("utf-8")
    assert text.endswith("}\n") and "\r" not in text
    data = json.loads(text)
    assert text == json.dumps(data, indent=2, sort_keys=True, ensure_ascii=False) + "\n"  # sorted keys, 2 spaces
    assert list(data["stages"]) == ["S1", "S2"] and list(data["raw_files"]) == sorted(data["raw_files"])
    assert dataclasses.replace(_full(), revision=1).sha256 == hashlib.sha256(first).hexdigest()


def _onto(path: Path, new: Interpretation) -> Interpretation:
    """``new``'s decisions as an edit of the file at ``path`` (a writer saves against what it read)."""
    read = load_interpretation(path)
    return dataclasses.replace(new, revision=read.revision, loaded=read.loaded)


def test_atomic_save_leaves_no_temporary_files(tmp_path: Path) -> None:
    path = tmp_path / "interpretation.json"
    save_interpretation(Interpretation(), path)
    save_interpretation(_onto(path, _full()), path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["interpretation.json", "interpretation.json.lock"]


def test_failed_save_keeps_the_old_file_and_cleans_up(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    path = tmp_path / "interpretation.json"
    save_interpretation(Interpretation(), path)
    before = path.read_bytes()

    def refuse(src: str, dst: str) -> None:
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(os, "replace", refuse)
    with pytest.raises(OSError, match=re.escape("disk full (simulated)")):
        save_interpretation(_onto(path, _full()), path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["interpretation.json", "interpretation.json.lock"]


@pytest.mark.parametrize(
    ("text", "parts"),
    [
        ('{"schema": "shearbook.interpretation/1", "stages": {', ["not valid JSON", "The file is left untouched"]),
        ("\u00e9t\u00e9", ["not valid JSON"]),
        ("[1, 2]", ["expected a JSON object at the top level"]),
        (
            '{"schema": "something/else", "schema_version": 1}',
            ["not a Shearbook interpretation file (schema 'something/else')"],
        ),
    ],
)
def test_corrupt_file_raises_and_is_not_overwritten(tmp_path: Path, text: str, parts: list[str]) -> None:
    path = tmp_path / "interpretation.json"
    path.write_text(text, encoding="utf-8")
    before = path.read_bytes()
    with pytest.raises(InterpretationFileError, match=re.escape(f"{path}: {parts[0]}")) as info:
        load_interpretation(path)
    for part in parts:
        assert part in str(info.value)
    with pytest.raises(InterpretationFileError, match=re.escape(parts[0])):
        save_interpretation(Interpretation(), path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["interpretation.json", "interpretation.json.lock"]


def _edited(tmp_path: Path, edit: dict[str, object], stage: dict[str, object] | None = None) -> Path:
    data = Interpretation().to_dict()
    data.update(edit)
    if stage is not None:
        data["stages"] = {"S1": stage}
    path = tmp_path / "interpretation.json"
    path.write_text(json.dumps(data), encoding="utf-8")
    return path


@pytest.mark.parametrize("version", [2, 17])
def test_future_schema_version(tmp_path: Path, version: int) -> None:
    path = _edited(tmp_path, {"schema_version": version})
    before = path.read_bytes()
    expected = f"{path}: written with schema version {version}; this Shearbook reads up to 1."
    with pytest.raises(InterpretationFileError, match=re.escape(expected)):
        load_interpretation(path)
    with pytest.raises(InterpretationFileError, match=re.escape(f"schema version {version}")):
        save_interpretation(Interpretation(), path)
    assert path.read_bytes() == before


NO_REASON = "a stage can only be excluded with a stated reason"
NO_WINDOW = "a manual critical-state window needs x_from_mm and x_to_mm"


@pytest.mark.parametrize(
    ("stage", "line"),
    [
        ({"included": False, "exclusion_reason": ""}, f"stages.S1: {NO_REASON}"),
        ({"included": False, "exclusion_reason": "   "}, f"stages.S1: {NO_REASON}"),
        ({"peak": {"source": "manual"}}, "stages.S1.peak: a manual peak pick needs x_mm"),
        ({"critical_state": {"source": "manual", "x_from_mm": 8.0}}, f"stages.S1.critical_state: {NO_WINDOW}"),
        ({"peak": {"x": 2.0}}, "stages.S1.peak.x: unknown key 'x'; known keys here: author, note, source, time_utc, "
                               "x_mm"),
        ({"peak": {"source": "manual", "x_mmm": 2.0}}, "stages.S1.peak.x_mmm: unknown key 'x_mmm'; did you mean x_mm?"),
        # one record holds every kind's place: a window's key on a peak is still unknown here, named as such
        ({"peak": {"source": "manual", "x_mm": 2.0, "x_to_mm": 4.0}},
         "stages.S1.peak.x_to_mm: unknown key 'x_to_mm'; known keys here: author, note, source, time_utc, x_mm"),
        ({"critical_state": {"pass_no": 2}}, "stages.S1.critical_state.pass_no: unknown key 'pass_no'; known keys "
                                             "here: author, note, source, time_utc, x_from_mm, x_to_mm"),
        ({"residual": {"x_mm": 2.0}}, "stages.S1.residual.x_mm: unknown key 'x_mm'; known keys here: author, note, "
                                      "pass_no, source, time_utc, x_from_mm, x_to_mm"),
        ({"colour": "red"}, "stages.S1.colour: unknown key 'colour'; known keys here: author, critical_state, "
                            "critical_state_reason, critical_state_used, exclusion_reason, included, note, peak, "
                            "residual, time_utc"),
        ({"critical_state_used": True}, "stages.S1: a critical state that was not reached can only be put back in "
                                        "the fit with a stated reason"),
        ({"critical_state": {"source": "manual", "x_from_mm": 8.0, "x_to_mm": 6.0}},
         "stages.S1.critical_state: a critical-state window runs from the smaller to the larger displacement: "
         "x_from_mm 8.0 is more than x_to_mm 6.0; swap them"),
        ({"residual": {"source": "manual", "pass_no": 0, "x_from_mm": 1.0, "x_to_mm": 6.0}},
         "stages.S1.residual: pass_no counts forward passes from 1, not 0"),
        ({"peak": {"source": "manual", "x_mm": True}},
         "stages.S1.peak.x_mm: Input should be a valid number (found true)"),
        ({"peak": {"source": "manual", "x_mm": "2.5"}},
         "stages.S1.peak.x_mm: Input should be a valid number (found \"2.5\")"),
        ({"included": "no", "exclusion_reason": "disturbed"},
         "stages.S1.included: Input should be a valid boolean (found \"no\")"),
    ],
)
def test_bad_decisions_in_the_file(tmp_path: Path, stage: dict[str, object], line: str) -> None:
    path = _edited(tmp_path, {}, stage)
    with pytest.raises(InterpretationFileError) as info:
        load_interpretation(path)
    assert str(info.value) == f"{path}: 1 problem(s); nothing was read or changed:\n  {line}"


def test_every_bad_pick_of_a_stage_is_reported_with_its_key(tmp_path: Path) -> None:
    """Three picks of one stage, each wrong in its own way: three problems, each at its own key."""
    path = _edited(tmp_path, {}, {"peak": {"source": "manual"},
                                  "critical_state": {"source": "manual", "x_from_mm": 9.0, "x_to_mm": 8.0},
                                  "residual": {"source": "manual", "x_mm": 1.0, "pass_no": 2, "x_from_mm": 1.0,
                                               "x_to_mm": 5.0}})
    with pytest.raises(InterpretationFileError) as info:
        load_interpretation(path)
    assert str(info.value).splitlines()[1:] == [
        "  stages.S1.peak: a manual peak pick needs x_mm",
        "  stages.S1.critical_state: a critical-state window runs from the smaller to the larger displacement: "
        "x_from_mm 9.0 is more than x_to_mm 8.0; swap them",
        "  stages.S1.residual.x_mm: unknown key 'x_mm'; known keys here: author, note, pass_no, source, time_utc, "
        "x_from_mm, x_to_mm",
    ]


def test_a_pick_is_written_with_its_own_keys_only(tmp_path: Path) -> None:
    """The one pick record writes the file's form of its kind: a peak has no window keys, a window no x_mm."""
    path = tmp_path / "interpretation.json"
    saved = (Interpretation().with_peak("S1", 2.0, "A").with_critical_state("S1", 9.0, 7.0, "A")
             .with_residual("S1", 2, 1.0, 5.0, "A"))
    save_interpretation(saved, path)
    stage = json.loads(path.read_text(encoding="utf-8"))["stages"]["S1"]
    assert sorted(stage["peak"]) == ["author", "note", "source", "time_utc", "x_mm"]
    assert sorted(stage["critical_state"]) == ["author", "note", "source", "time_utc", "x_from_mm", "x_to_mm"]
    assert (stage["critical_state"]["x_from_mm"], stage["critical_state"]["x_to_mm"]) == (7.0, 9.0)  # put in order
    assert sorted(stage["residual"]) == ["author", "note", "pass_no", "source", "time_utc", "x_from_mm", "x_to_mm"]
    assert load_interpretation(path).decision("S1") == saved.decision("S1")  # and it reads back as it was


@pytest.mark.parametrize("token", ["NaN", "Infinity", "-Infinity", "1e400"])
def test_nan_and_infinity_are_never_a_pick(tmp_path: Path, token: str) -> None:
    path = _edited(tmp_path, {}, {"peak": {"source": "manual", "x_mm": 1.0}})
    path.write_text(path.read_text(encoding="utf-8").replace('"x_mm": 1.0', f'"x_mm": {token}'), encoding="utf-8")
    with pytest.raises(InterpretationFileError, match=r"stages\.S1\.peak\.x_mm: Input should be a finite number"):
        load_interpretation(path)


def test_every_problem_of_the_file_is_reported_at_once(tmp_path: Path) -> None:
    path = _edited(tmp_path, {"settings": {"fit": {"cohesion": "some", "levle": 0.9}}},
                   {"peak": {"source": "manual", "x_mm": "x"}, "included": 0})
    with pytest.raises(InterpretationFileError) as info:
        load_interpretation(path)
    lines = str(info.value).splitlines()
    assert lines[0] == f"{path}: 4 problem(s); nothing was read or changed:"
    assert sorted(lines[1:]) == sorted([
        "  settings.fit.cohesion: found \"some\"; allowed: 'free' or 'zero' ('zero' is the fit through the origin, "
        "c' = 0)",
        "  settings.fit.levle: unknown key 'levle'; did you mean level?",
        "  stages.S1.included: Input should be a valid boolean (found 0)",
        "  stages.S1.peak.x_mm: Input should be a valid number (found \"x\")",
    ])


@pytest.mark.parametrize(
    ("section", "value", "part"),
    [
        ("fit", {"cohesion": "some"}, "settings.fit.cohesion: found \"some\"; allowed: 'free' or 'zero'"),
        # the word in code and on screen is the origin; the file keeps its first spelling, and says so
        ("fit", {"cohesion": "origin"}, "settings.fit.cohesion: found \"origin\"; allowed: 'free' or 'zero' ('zero' is "
                                        "the fit through the origin, c' = 0)"),
        ("picks", {"critical_state_window_mm": 3.0}, "settings.picks.critical_state_window_mm: unknown key "
                                                     "'critical_state_window_mm'; the file spells it cs_window_mm "
                                                     "(schema 1)"),
        ("fit", {"level": 1.5}, "settings.fit: level must be between 0.5 and 1, not 1.5"),
        ("reduction", {"area_convention": "shrunk"},
         "settings.reduction.area_convention: found \"shrunk\"; allowed: 'corrected' or 'nominal'"),
        ("picks", {"cs_window_mm": 0}, "settings.picks: cs_window_mm must be positive, not 0"),
        ("rate", {"time_to_failure": "100 t_50"}, "settings.rate: time_to_failure must be one of 'largest', "
                                                  "'50 t_50', '11.6 t_90', '12.7 t_100', not '100 t_50'"),
        ("rate", {"rule": "largest"}, "settings.rate.rule: unknown key 'rule'; known keys here: time_to_failure"),
    ],
)
def test_bad_settings_in_the_file(tmp_path: Path, section: str, value: dict[str, object], part: str) -> None:
    settings = Interpretation().to_dict()["settings"]
    settings[section] = {**settings[section], **value}
    path = _edited(tmp_path, {"settings": settings})
    with pytest.raises(InterpretationFileError, match=re.escape(f"{path}: 1 problem(s); nothing was read or changed:"
                                                                f"\n  {part}")):
        load_interpretation(path)


@pytest.mark.parametrize(
    ("build", "message"),
    [
        (lambda: StageDecision(included=False), NO_REASON),
        (lambda: StageDecision(peak=Pick(source="manual")), "a manual peak pick needs x_mm"),
        (lambda: StageDecision(critical_state=Pick(source="manual", x_to_mm=3.0)), NO_WINDOW),
        (lambda: StageDecision(peak=Pick(source="manual", x_mm=1.0, x_to_mm=3.0)), "unknown key 'x_to_mm'"),
    ],
)
def test_bad_decisions_in_code(build: object, message: str) -> None:
    with pytest.raises(ValueError, match=re.escape(message)):
        build()  # type: ignore[operator]


def test_missing_file_gives_all_suggested(tmp_path: Path) -> None:
    loaded = load_interpretation(tmp_path / "interpretation.json")
    assert loaded == Interpretation()
    assert loaded.decision("anything") == StageDecision()
    assert not (tmp_path / "interpretation.json").exists()  # loading never creates the file


def test_the_files_keep_their_schema_1_spellings(tmp_path: Path, example_copy: Path) -> None:
    """In code the words are critical_state_* and the origin; the files keep the spellings they were first
    written with (a signed sign-off digests their content): cs_window_mm and friends, and "zero"."""
    from kernels_helpers import interpret
    from kernels_helpers.settings import FILE_KEYS

    picks = PickSettings(critical_state_window_mm=3.0, critical_state_rate_tolerance=0.02,
                         critical_state_trend_tolerance=0.04)
    interp = Interpretation(settings=Settings(picks=picks, fit=FitSettings(cohesion=Cohesion.ORIGIN)))
    path = tmp_path / "interpretation.json"
    save_interpretation(interp, path)
    saved = json.loads(path.read_text(encoding="utf-8"))["settings"]
    assert {k: saved["picks"][k] for k in FILE_KEYS.values()} == {
        "cs_window_mm": 3.0, "cs_rate_tolerance": 0.02, "cs_trend_tolerance": 0.04}
    assert not set(FILE_KEYS) & set(saved["picks"]) and saved["fit"]["cohesion"] == "zero"
    back = load_interpretation(path)
    assert back.settings == interp.settings and back.settings.fit.cohesion is Cohesion.ORIGIN
    assert back.settings.picks.critical_state_window_mm == 3.0
    results = json.loads(interpret(example_copy, back).to_json())
    assert results["settings"] == saved  # the results state the settings as the file does
    assert {e["reported"] for e in results["envelopes"] if e["origin"]} == {"zero"}
    # text given in code is the member it spells; the word of the code is not the file's
    assert FitSettings(cohesion="zero").cohesion is Cohesion.ORIGIN  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="cohesion must be 'free' or 'zero'"):
        FitSettings(cohesion="origin")  # type: ignore[arg-type]
