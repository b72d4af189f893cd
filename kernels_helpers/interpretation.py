"""The interpretation file: reading it, every problem at once, and checking its stage ids.

An interpretation file holds every decision the engineer made (the records of :mod:`.decisions`),
as JSON with sorted keys. Reading validates it against the file models (:mod:`.file_models`); a
corrupt file, or one written by a newer Shearbook, raises :class:`InterpretationFileError` and is
never overwritten. Saving (atomic, against the revision read) is :mod:`.revisions`.
"""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from . import decisions
from .decisions import *  # noqa: F403  (the records, re-exported where callers have always found them)
from .decisions import SCHEMA, SCHEMA_VERSION, Interpretation
from .errors import InterpretationFileError
from .file_models import check_interpretation_data, check_interpretation_text, listing

__all__ = [*decisions.__all__, "check_stage_ids", "from_dict", "load_interpretation"]


def from_dict(data: Any, where: str) -> Interpretation:
    """Build an :class:`Interpretation` from parsed JSON; every problem of it in one error."""
    _refuse_newer(data, where)
    model, problems = check_interpretation_data(data, where)
    return _from_model(model, problems, where)


def _refuse_newer(data: Any, where: str) -> None:
    if not isinstance(data, Mapping):
        raise InterpretationFileError(f"{where}: expected a JSON object at the top level, found "
                                      f"{type(data).__name__}. The file is left untouched.")
    if data.get("schema") != SCHEMA:
        raise InterpretationFileError(f"{where}: not a Shearbook interpretation file (schema {data.get('schema')!r}).")
    version = data.get("schema_version")
    if isinstance(version, int) and not isinstance(version, bool) and version > SCHEMA_VERSION:
        raise InterpretationFileError(
            f"{where}: written with schema version {version!r}; this Shearbook reads up to {SCHEMA_VERSION}. "
            "Upgrade Shearbook; the file is left untouched."
        )


def _from_model(model: Any, problems: list[Any], where: str) -> Interpretation:
    if model is None:
        raise InterpretationFileError(f"{where}: {len(problems)} problem(s); nothing was read or changed:\n"
                                      + listing(problems))
    return Interpretation(stages=dict(model.stages), settings=model.settings, raw_files=dict(model.raw_files),
                          signoff=model.signoff, design=model.design, revision=model.revision)


def check_stage_ids(interpretation: Interpretation, stage_ids: Sequence[str], where: str) -> None:
    """Every stage the interpretation decides about must be a stage of the project; else an error naming
    the nearest id (a decision for a misspelt id would otherwise do nothing, in silence)."""
    import difflib

    unknown = sorted(set(interpretation.stages) - set(stage_ids))
    if not unknown:
        return
    lines = []
    for sid in unknown:
        folded = {i.strip().casefold(): i for i in stage_ids}
        near = folded.get(sid.strip().casefold()) or next(iter(difflib.get_close_matches(sid, stage_ids, 1, 0.6)), None)
        lines.append(f"  stages[{json.dumps(sid, ensure_ascii=False)}]: no stage of that id in the project"
                     + (f"; did you mean {near!r}?" if near else f"; its stages are {', '.join(stage_ids)}"))
    raise InterpretationFileError(f"{where}: decisions for {len(unknown)} stage id(s) that are not in the project "
                                  "(they would do nothing); correct the id(s):\n" + "\n".join(lines))


def load_interpretation(path: str | Path) -> Interpretation:
    """Read and validate an interpretation file; a missing file gives the all-suggested default.

    Every problem of the file is reported at once (:class:`InterpretationFileError`), naming the key
    path, the value found and what is allowed; the file is never changed by a failed read.
    """
    p = Path(path)
    if not p.exists():
        return Interpretation()
    try:
        text = p.read_bytes().decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InterpretationFileError(
            f"{p}: not UTF-8 text (byte {exc.start} is {exc.object[exc.start:exc.start + 1]!r}); an interpretation "
            "file is UTF-8 JSON. The file is left untouched; restore it from version control or a backup.") from None
    except OSError as exc:
        raise InterpretationFileError(f"{p}: cannot be read ({exc.strerror}).") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InterpretationFileError(
            f"{p}: not valid JSON ({exc}). The file is left untouched; restore it from version control or a backup."
        ) from None
    except RecursionError:
        raise InterpretationFileError(f"{p}: nested too deeply to be an interpretation file. The file is left "
                                      "untouched; restore it from version control or a backup.") from None
    _refuse_newer(data, str(p))
    model, problems = check_interpretation_text(text, str(p))
    interpretation = _from_model(model, problems, str(p))
    return dataclasses.replace(interpretation, loaded=interpretation.to_dict())
