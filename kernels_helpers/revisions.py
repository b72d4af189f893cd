"""No lost update: saving the interpretation file against the revision it was read at.

Two writers on one project (two workbooks, a workbook and ``shearbook signoff``, a script) must not
overwrite each other in silence. Each save, under a lock file beside the interpretation file
(``interpretation.json.lock``, the filelock package):

1. removes the temporary files a killed writer left (``.interpretation.json.*.tmp``; every writer
   makes its temporary file under the lock, so one found there is no one's);
2. reads the file on disk (a file that cannot be read is never overwritten);
3. if the file is still what this writer read (same revision, same content), writes the new
   interpretation with the revision plus one;
4. otherwise merges: the decisions this writer changed since it read the file (a stage's decision,
   one settings section, the design choices, the sign-off, one raw file's hash) are laid over the
   file on disk when the other writer changed different ones, and the save says which decisions it
   took from disk; when both changed the same decision differently it refuses
   (:class:`ConcurrentEditError`) and says what changed on disk, by whom and when;
5. never lets the sign-off history shrink: a stale writer cannot undo a sign-off.
"""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .atomic import write_text_atomic
from .errors import InterpretationFileError
from .interpretation import Interpretation, StageDecision, from_dict, load_interpretation

__all__ = ["ConcurrentEditError", "Saved", "lock_path", "save_checked", "save_interpretation"]

LOCK_TIMEOUT_S = 30.0


class ConcurrentEditError(InterpretationFileError):
    """The file changed on disk since it was read, in the same decisions as this save: nothing was written."""

    def __init__(self, message: str, conflicts: tuple[str, ...]) -> None:
        super().__init__(message)
        self.conflicts = conflicts


@dataclass(frozen=True)
class Saved:
    """What a save wrote: the interpretation now on disk, and what it took from another writer."""

    path: Path
    interpretation: Interpretation  # as written: the new revision, and the base of the next save
    merged: tuple[str, ...] = ()  # decisions another writer saved meanwhile, kept (e.g. "stage BH03-D2")


def lock_path(path: Path) -> Path:
    return path.with_name(path.name + ".lock")


def _stale_temporaries(path: Path) -> list[Path]:
    return sorted(path.parent.glob(f".{path.name}.*.tmp"))


def _units(data: Mapping[str, Any]) -> dict[tuple[str, ...], Any]:
    """The file's decisions, each a unit of merging, with its value (absent = its default)."""
    default_stage = dataclasses.asdict(StageDecision())
    units: dict[tuple[str, ...], Any] = {("stage", sid): d for sid, d in data.get("stages", {}).items()
                                         if d != default_stage}
    units.update({("settings", k): v for k, v in data.get("settings", {}).items()})
    units.update({("raw_file", k): v for k, v in data.get("raw_files", {}).items()})
    units[("design",)] = data.get("design")
    units[("signoff",)] = data.get("signoff")
    return units


def _label(unit: tuple[str, ...]) -> str:
    kind, *rest = unit
    return {"stage": "stage {}", "settings": "settings.{}", "raw_file": "raw file {}"}.get(kind, kind).format(*rest)


def _who(value: Any) -> str:
    """Who changed a decision on disk and when, where the file says."""
    if isinstance(value, Mapping):
        if value.get("history"):
            value = value["history"][-1]
        stamps = [v for v in (value, *(x for x in value.values() if isinstance(x, Mapping)))
                  if isinstance(v, Mapping) and (v.get("author") or v.get("who"))]
        if stamps:
            last = max(stamps, key=lambda v: str(v.get("time_utc", "")))
            return f" (by {last.get('author') or last.get('who')} at {last.get('time_utc') or 'an unknown time'})"
    return ""


def _without_revision(data: Mapping[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in data.items() if k != "revision"}


def _merge(mine: Interpretation, disk: Interpretation, path: Path) -> tuple[Interpretation, tuple[str, ...]]:
    if mine.loaded is None:
        raise ConcurrentEditError(
            f"{path}: the file is at revision {disk.revision} and this interpretation was not read from it; nothing "
            "was written. Load the file, make the change on what it holds, and save again.", ())
    base, ours, theirs = _units(mine.loaded), _units(mine.to_dict()), _units(disk.to_dict())
    keys = set(base) | set(ours) | set(theirs)
    changed_here = {k for k in keys if ours.get(k) != base.get(k)}
    changed_there = {k for k in keys if theirs.get(k) != base.get(k)}
    clashes = sorted(k for k in changed_here & changed_there if ours.get(k) != theirs.get(k))
    if clashes:
        what = tuple(f"{_label(k)}{_who(theirs.get(k))}" for k in clashes)
        raise ConcurrentEditError(
            f"{path}: changed on disk since it was read (revision {mine.revision} -> {disk.revision}), in the same "
            f"decision(s) as this save: {'; '.join(what)}. Nothing was written: reload the file and make the change "
            "again on what it holds now.", what)
    merged = dict(theirs)
    for k in changed_here:
        if k in ours:
            merged[k] = ours[k]
        else:
            merged.pop(k, None)
    data = disk.to_dict()
    data["stages"] = {k[1]: v for k, v in sorted(merged.items()) if k[0] == "stage"}
    data["settings"] = {k[1]: v for k, v in merged.items() if k[0] == "settings"}
    data["raw_files"] = {k[1]: v for k, v in sorted(merged.items()) if k[0] == "raw_file"}
    data["design"], data["signoff"] = merged[("design",)], merged[("signoff",)]
    result = from_dict(json.loads(json.dumps(data)), f"{path} (merged)")
    taken = tuple(_label(k) for k in sorted(changed_there - changed_here))
    return dataclasses.replace(result, revision=disk.revision), taken


def _keeps_signoff(disk: Interpretation, new: Interpretation, path: Path) -> None:
    old, now = list(disk.signoff.history), list(new.signoff.history)
    if now[: len(old)] != old:
        raise ConcurrentEditError(
            f"{path}: this save would remove or change sign-off step(s) recorded in the file ({disk.signoff.state}, "
            f"{len(old)} step(s)); the sign-off history only grows. Nothing was written.", ("signoff",))


def save_checked(interpretation: Interpretation, path: str | Path, lock_timeout_s: float = LOCK_TIMEOUT_S) -> Saved:
    """Save ``interpretation`` to ``path`` against the revision it was read at (see the module docstring)."""
    from filelock import FileLock, Timeout

    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    try:
        lock = FileLock(lock_path(p), timeout=lock_timeout_s)
        lock.acquire()
    except Timeout:
        raise InterpretationFileError(f"{p}: another writer has held {lock_path(p).name} for {lock_timeout_s:g} s; "
                                      "nothing was written. Try again; if no one is saving, delete the lock file.")\
            from None
    try:
        for stale in _stale_temporaries(p):  # left by a killed writer: every writer makes its own under this lock
            stale.unlink(missing_ok=True)
        disk = load_interpretation(p) if p.exists() else None  # raises on a file it cannot read: never overwritten
        merged: tuple[str, ...] = ()
        new = interpretation
        if disk is not None:
            same = disk.revision == new.revision and (
                new.loaded is None or _without_revision(disk.to_dict()) == _without_revision(new.loaded))
            if not same:
                new, merged = _merge(new, disk, p)
            _keeps_signoff(disk, new, p)
        new = dataclasses.replace(new, revision=(disk.revision if disk else new.revision) + 1)
        write_text_atomic(p, new.to_json())
    finally:
        lock.release()
    return Saved(p, dataclasses.replace(new, loaded=new.to_dict()), merged)


def save_interpretation(interpretation: Interpretation, path: str | Path) -> Path:
    """Write the interpretation atomically, against the revision it was read at; the path written.

    Refuses (:class:`ConcurrentEditError`) when another writer changed the same decisions since, and
    never overwrites a file it cannot read. :func:`save_checked` also returns the interpretation as
    written and what was merged from disk.
    """
    return save_checked(interpretation, path).path
