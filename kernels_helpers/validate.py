"""``shearbook check``: every problem of a project at once, before any number is computed.

Reads the project file, the interpretation file and every readings file (shearing and
consolidation), and collects what is wrong with each instead of stopping at the first: the key
path and value for the two hand-edited files (:mod:`.file_models`), the stage and line for the
readings. When every file reads, the whole interpretation is run once, so that what would stop a
run (a reduction, a pick on too few readings) is found too. Nothing is written.
"""

from __future__ import annotations

import json
import tomllib
from dataclasses import dataclass
from pathlib import Path

from .errors import ShearbookError
from .interpretation import INTERPRETATION_FILE, check_stage_ids, load_interpretation
from .project import PROJECT_FILE, Project, load_project

__all__ = ["ProjectCheck", "check_project"]


@dataclass(frozen=True)
class ProjectCheck:
    """What ``check_project`` found: one sentence per problem, and what it read."""

    problems: tuple[str, ...]
    files_read: tuple[str, ...]

    @property
    def ok(self) -> bool:
        return not self.problems

    def to_text(self) -> str:
        if self.ok:
            return f"no problems found in {len(self.files_read)} file(s): {', '.join(self.files_read)}\n"
        return "\n".join(self.problems) + f"\n{len(self.problems)} problem(s) found; nothing was changed.\n"


def _project_problems(root: Path) -> tuple[Project | None, list[str]]:
    from .file_models import check_project_table

    path = root / PROJECT_FILE
    try:
        return load_project(root), []
    except ShearbookError as exc:
        first = str(exc)
    try:  # the file parses: list every problem of the model, not only the sentence of the first
        raw = tomllib.loads(path.read_bytes().decode("utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError):
        return None, [first]
    problems = check_project_table(raw, str(path))
    return None, [str(p) for p in problems] or [first]


def _interpretation_problems(project: Project, path: Path) -> list[str]:
    from .file_models import check_interpretation_text

    try:
        interp = load_interpretation(path)
    except ShearbookError as exc:
        try:
            _, problems = check_interpretation_text(path.read_bytes().decode("utf-8"), str(path))
        except (OSError, UnicodeDecodeError, ValueError):
            problems = []
        return [str(p) for p in problems] or [str(exc)]
    try:
        check_stage_ids(interp, [s.id for s in project.stages], str(path))
    except ShearbookError as exc:
        head, *lines = str(exc).splitlines()
        return [f"{path}: {line.strip()}" for line in lines] or [head]
    return []


def _readings_problems(project: Project) -> tuple[list[str], list[str]]:
    from .readings import read_consolidation, read_stage

    problems, read = [], []
    for spec in project.stages:
        for what, reader, relpath in (("readings", read_stage, spec.relpath),
                                      ("consolidation readings", read_consolidation,
                                       spec.consolidation.relpath if spec.consolidation else None)):
            if relpath is None:
                continue
            try:
                reader(spec)
                read.append(relpath)
            except ShearbookError as exc:
                problems.append(f"stage {json.dumps(spec.id, ensure_ascii=False)} {what}: {exc}")
    return problems, read


def check_project(folder: str | Path, interpretation_file: str | Path | None = None) -> ProjectCheck:
    """Every problem of the project in ``folder``: project file, interpretation file, readings files."""
    root = Path(folder).resolve()
    project, problems = _project_problems(root)
    if project is None:  # without a valid project file the other files cannot be checked against it
        return ProjectCheck(tuple(problems), ())
    interp_path = Path(interpretation_file).resolve() if interpretation_file else root / INTERPRETATION_FILE
    read = [PROJECT_FILE]
    problems += _interpretation_problems(project, interp_path)
    if interp_path.exists():
        read.append(str(interp_path.relative_to(root)) if interp_path.is_relative_to(root) else str(interp_path))
    found, readings = _readings_problems(project)
    problems += found
    if not problems:  # every file reads: what would still stop a run (a reduction, a pick on too few readings)
        from .pipeline import interpret

        try:
            interpret(project, interp_path)
        except ShearbookError as exc:
            problems.append(str(exc))
    return ProjectCheck(tuple(problems), tuple(read + readings))
