"""Reading a stage's raw readings file into canonical units.

The file is read once as bytes: the SHA-256 is taken of exactly the bytes that are parsed, and the
file is never written. Columns are picked by the column map of the project file, converted to
mm, N, kPa and s, and the vertical gauge is flipped when it reads down on dilation.
"""

from __future__ import annotations

import hashlib
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import ReadingsError
from .project import StageSpec

__all__ = ["StageReadings", "read_stage", "sha256_of"]

#: canonical column names of a readings table, with their units
CANONICAL_COLUMNS = {
    "time": "time_s",
    "horizontal_displacement": "x_mm",
    "vertical_displacement": "y_mm",
    "shear_force": "shear_force_n",
    "shear_stress": "shear_stress_nominal_kpa",
    "normal_force": "normal_force_n",
    "normal_stress": "normal_stress_nominal_kpa",
}


@dataclass(frozen=True)
class StageReadings:
    """A stage's readings in canonical units, with the provenance of the file they came from.

    ``table`` has ``time_s``, ``x_mm`` (positive in the direction of shearing), ``y_mm``
    (positive for dilation) and ``shear_force_n`` or ``shear_stress_nominal_kpa``, plus the
    normal columns when the file has them. Row order is the file's.
    """

    stage_id: str
    table: pd.DataFrame
    sha256: str
    size_bytes: int
    relpath: str
    first_data_line: int  # 1-based line number of the first data row in the file


def sha256_of(path: Path) -> str:
    """SHA-256 of a file's bytes, as 64 hex digits."""
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _decode(stage: StageSpec, data: bytes) -> str:
    try:
        return data.decode(stage.csv.encoding)
    except UnicodeDecodeError as exc:
        raise ReadingsError(
            f"{stage.file}: cannot be decoded as {stage.csv.encoding} (byte {exc.start}). "
            "Set csv.encoding in the project file (e.g. \"latin-1\")."
        ) from exc


def _line_numbers(text: str, header_row: int) -> tuple[int, list[int]]:
    """1-based line numbers of the header and of each data row.

    The parser skips blank (or whitespace-only) lines, so a data row's line in the file is not
    simply its index plus an offset; messages must name the line a person sees in an editor.
    """
    lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
    filled = [i + 1 for i, line in enumerate(lines) if i >= header_row and line.strip()]
    return (filled[0], filled[1:]) if filled else (header_row + 1, [])


def _parse(stage: StageSpec, text: str) -> pd.DataFrame:
    fmt = stage.csv
    try:
        return pd.read_csv(
            io.StringIO(text),
            sep=fmt.delimiter,
            decimal=fmt.decimal,
            skiprows=fmt.header_row,
            header=0,
            skipinitialspace=True,
            dtype=str,
            keep_default_na=False,
        )
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise ReadingsError(f"{stage.file}: cannot be parsed as delimited text ({exc}). Check csv.delimiter and csv.header_row.") from exc


def _numeric(stage: StageSpec, frame: pd.DataFrame, column: str, lines: list[int]) -> np.ndarray:
    raw = frame[column].astype(str).str.strip()
    if stage.csv.decimal != ".":
        raw = raw.str.replace(stage.csv.decimal, ".", regex=False)
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        i = int(bad[0])
        line = lines[min(i, len(lines) - 1)] if lines else i + 1  # lines has one entry per data row
        raise ReadingsError(
            f"{stage.file}, line {line}, column {column!r}: {frame[column].iloc[i]!r} is not a number "
            f"({bad.size} such value(s) in this column). Fix the file's copy or the column map; Shearbook never edits raw readings."
        )
    return values


def read_stage(stage: StageSpec) -> StageReadings:
    """Read the readings file of ``stage`` into canonical units.

    Raises
    ------
    ReadingsError
        Naming the file, line and column when a column is missing or a value is not a number.
    """
    path = stage.file
    if not path.is_file():
        raise ReadingsError(f"{path}: readings file of stage {stage.id!r} not found. Check 'file' in the project file.")
    data = path.read_bytes()
    text = _decode(stage, data)
    frame = _parse(stage, text)
    header_line, lines = _line_numbers(text, stage.csv.header_row)
    absent = [c.column for c in stage.columns.values() if c.column not in frame.columns]
    if absent:
        found = ", ".join(repr(c) for c in frame.columns)
        raise ReadingsError(
            f"{path}: column(s) {', '.join(repr(a) for a in absent)} named in the column map are not in the header "
            f"(line {header_line}). Header has: {found}."
        )
    if len(frame) < 10:
        raise ReadingsError(f"{path}: only {len(frame)} data rows; a shear stage needs many more. Check csv.header_row.")
    out: dict[str, np.ndarray] = {}
    for quantity, spec in stage.columns.items():
        values = _numeric(stage, frame, spec.column, lines) * spec.factor
        if quantity == "vertical_displacement" and not spec.dilation_positive:
            values = -values
        out[CANONICAL_COLUMNS[quantity]] = values
    return StageReadings(
        stage_id=stage.id,
        table=pd.DataFrame(out),
        sha256=hashlib.sha256(data).hexdigest(),
        size_bytes=len(data),
        relpath=stage.relpath,
        first_data_line=lines[0] if lines else header_line + 1,
    )
