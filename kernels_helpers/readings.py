"""Reading a stage's raw readings file into canonical units.

The file is read once as bytes: the SHA-256 is taken of exactly the bytes that are parsed, and the
file is never written. Columns are picked by the column map of the project file, zero offsets
removed, converted to mm, N, kPa and s, and the vertical gauge is flipped when it reads down on
dilation. Delimited text goes through pandas' C parser with numeric columns; only when a value is
not a number is the file parsed again as text, to name the line and column at fault. Workbooks
(``.xlsx``) are read with openpyxl.
"""

from __future__ import annotations

import hashlib
import io
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .errors import ReadingsError
from .project import CalibrationSpec, ColumnSpec, CsvFormat, StageSpec

__all__ = ["StageReadings", "read_consolidation", "read_stage", "read_table", "sha256_of"]

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
MIN_SHEAR_ROWS = 10
MIN_CONSOLIDATION_ROWS = 8
_BLANK_LINE = re.compile(rb"\n[ \t]*\r?\n|\n[ \t]+\Z")
_JUNK = re.compile(rb"[\x00-\x08\x0e-\x19\x1b-\x1f]")  # control bytes no text file holds (tab, CR, LF, FF, ^Z pass)


@dataclass(frozen=True)
class StageReadings:
    """A stage's readings in canonical units, with the provenance of the file they came from.

    ``table`` has ``time_s``, ``x_mm`` (positive in the direction of shearing), ``y_mm``
    (positive for dilation) and ``shear_force_n`` or ``shear_stress_nominal_kpa``, plus the
    normal columns when the file has them. Row order is the file's. ``notes`` are flags raised
    while reading (e.g. times that do not increase, with ``csv.time_order = "flag"``).
    """

    stage_id: str
    table: pd.DataFrame
    sha256: str
    size_bytes: int
    relpath: str
    first_data_line: int  # 1-based line number of the first data row in the file
    lines: np.ndarray | None = field(default=None, repr=False)  # line of each row; None: consecutive
    notes: tuple[str, ...] = ()

    def line(self, row: int) -> int:
        """1-based line (text) or sheet row (xlsx) of data row ``row``, as a person sees it."""
        if self.lines is None:
            return self.first_data_line + int(row)
        return int(self.lines[min(int(row), len(self.lines) - 1)])


def sha256_of(path: Path) -> str:
    """SHA-256 of a file's bytes, as 64 hex digits."""
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _decode(path: Path, fmt: CsvFormat, data: bytes) -> str:
    try:
        return data.decode(fmt.encoding)
    except UnicodeDecodeError as exc:
        raise ReadingsError(
            f"{path}: cannot be decoded as {fmt.encoding} (byte {exc.start}). "
            "Set csv.encoding in the project file (e.g. \"latin-1\")."
        ) from exc
    except LookupError as exc:
        raise ReadingsError(f"{path}: unknown encoding {fmt.encoding!r}; set csv.encoding to e.g. \"utf-8\".") from exc


def _line_numbers(text: str, header_row: int) -> tuple[int, list[int]]:
    """1-based line numbers of the header and of each data row.

    The parser skips blank (or whitespace-only) lines, so a data row's line in the file is not
    simply its index plus an offset; messages must name the line a person sees in an editor.
    """
    lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
    filled = [i + 1 for i, line in enumerate(lines) if i >= header_row and line.strip()]
    return (filled[0], filled[1:]) if filled else (header_row + 1, [])


def _header_line_fast(data: bytes, header_row: int) -> tuple[int, int] | None:
    """(1-based header line, byte offset after it) when no blank line follows it; else None."""
    if b"\n" not in data and b"\r" in data:
        return None
    pos, line = 0, 0
    while True:
        end = data.find(b"\n", pos)
        chunk = data[pos : len(data) if end < 0 else end]
        if line >= header_row and chunk.strip():
            break
        if end < 0:
            return None
        pos, line = end + 1, line + 1
    after = len(data) if end < 0 else end
    return (line + 1, after) if not _BLANK_LINE.search(data, after) else None


def _read_csv(path: Path, fmt: CsvFormat, source: bytes | str, usecols: list[str] | None,
              as_text: bool) -> pd.DataFrame:
    buffer = io.StringIO(source) if isinstance(source, str) else io.BytesIO(source)
    try:
        frame: pd.DataFrame = pd.read_csv(
            buffer, sep=fmt.delimiter, decimal=fmt.decimal, skiprows=fmt.header_row, header=0, skipinitialspace=True,
            usecols=usecols, encoding=None if isinstance(source, str) else fmt.encoding,
            dtype=str if as_text else None, keep_default_na=not as_text,
        )
        return frame
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as exc:
        if isinstance(exc, UnicodeDecodeError):
            raise
        raise ReadingsError(
            f"{path}: cannot be parsed as delimited text ({exc}). Check csv.delimiter and csv.header_row."
        ) from exc


def _xlsx_frame(path: Path, fmt: CsvFormat, data: bytes) -> tuple[pd.DataFrame, int, list[int]]:
    """All cells of one sheet as text, the header's sheet row and each data row's sheet row."""
    import openpyxl  # imported here: only workbooks need it

    try:
        book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises zip, XML and key errors for files that are not workbooks
        raise ReadingsError(f"{path}: not a readable .xlsx workbook ({type(exc).__name__}: {exc}). "
                            "Save it again as .xlsx, or as CSV and set csv.format = \"text\".") from exc
    try:
        rows, numbers = _sheet_rows(path, fmt, book)
    except ReadingsError:
        raise
    except Exception as exc:  # a damaged sheet inside a readable zip fails only while its rows are read
        raise ReadingsError(f"{path}: the workbook is damaged; its rows cannot be read ({type(exc).__name__}: "
                            f"{exc}). Save it again as .xlsx, or as CSV and set csv.format = \"text\".") from None
    finally:
        book.close()
    if not rows:
        raise ReadingsError(f"{path}: the sheet has no header row at or below row {fmt.header_row + 1}. "
                            "Check csv.header_row.")
    header = [h.strip() for h in rows[0]]
    width = len(header)
    body = [(row + [""] * width)[:width] for row in rows[1:]]
    return pd.DataFrame(body, columns=header, dtype=str), numbers[0], numbers[1:]


def _sheet_rows(path: Path, fmt: CsvFormat, book: Any) -> tuple[list[list[str]], list[int]]:
    """The non-blank rows of the sheet from the header down, as text, with their sheet row numbers."""
    if fmt.sheet and fmt.sheet not in book.sheetnames:
        raise ReadingsError(f"{path}: no sheet {fmt.sheet!r}; the workbook has {book.sheetnames}. Set csv.sheet.")
    sheet = book[fmt.sheet] if fmt.sheet else book.worksheets[0]
    rows: list[list[str]] = []
    numbers: list[int] = []
    for r, values in enumerate(sheet.iter_rows(values_only=True)):
        cells = ["" if v is None else (repr(v) if isinstance(v, float) else str(v)) for v in values]
        if r >= fmt.header_row and any(c.strip() for c in cells):
            rows.append(cells)
            numbers.append(r + 1)
    return rows, numbers


def _numeric(path: Path, fmt: CsvFormat, frame: pd.DataFrame, column: str, lines: list[int]) -> np.ndarray:
    raw = frame[column].astype(str).str.strip()
    if fmt.decimal != ".":
        raw = raw.str.replace(fmt.decimal, ".", regex=False)
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        i = int(bad[0])
        line = lines[min(i, len(lines) - 1)] if lines else i + 1  # lines has one entry per data row
        raise ReadingsError(
            f"{path}, line {line}, column {column!r}: {frame[column].iloc[i]!r} is not a number "
            f"({bad.size} such value(s) in this column). Fix the file's copy or the column map; "
            "Shearbook never edits raw readings."
        )
    return values


def _check_columns(path: Path, columns: Mapping[str, ColumnSpec], header: list[str], header_line: int) -> None:
    absent = [c.column for c in columns.values() if c.column not in header]
    if absent:
        found = ", ".join(repr(c) for c in header)
        raise ReadingsError(
            f"{path}: column(s) {', '.join(repr(a) for a in absent)} named in the column map are not in the header "
            f"(line {header_line}). Header has: {found}. Correct the column map in the project file (or re-import "
            "with --column QUANTITY=NAME)."
        )


def _binary_junk(path: Path, data: bytes) -> None:
    """A text readings file holds no NUL or other control bytes (a damaged copy, or not a text file at all)."""
    m = _JUNK.search(data)
    if m:
        line = data.count(b"\n", 0, m.start()) + 1
        raise ReadingsError(f"{path}, line {line}: byte {m.group()!r} is not text: the file is damaged or not a "
                            "delimited text file. Ask the laboratory for a clean copy; Shearbook never edits raw "
                            "readings.")


def _unique_header(path: Path, header: list[str], header_line: int) -> None:
    """Two columns of one name would leave the column map ambiguous (pandas renames the second in silence)."""
    seen: dict[str, int] = {}
    for i, name in enumerate(header):
        key = re.sub(r"\.\d+$", "", name) if name not in seen and re.sub(r"\.\d+$", "", name) in seen else name
        if key in seen:
            raise ReadingsError(f"{path}, line {header_line}: columns {seen[key] + 1} and {i + 1} have the same name "
                                f"{key!r}; the column map cannot tell them apart. Ask the laboratory which is which "
                                "and map a renamed copy of the file.")
        seen[key] = i


def _tidy(path: Path, fmt: CsvFormat, frame: pd.DataFrame, columns: Mapping[str, ColumnSpec], lines: list[int]
          ) -> tuple[dict[str, np.ndarray], list[int], tuple[str, ...]]:
    """Numbers of every mapped column; rows with a blank or non-numeric cell left out with a note ("flag",
    the default) or refused with the line and column ("refuse", csv.untidy_rows)."""
    def lenient(column: str) -> np.ndarray:
        raw = frame[column].astype(str).str.strip()
        if fmt.decimal != ".":
            raw = raw.str.replace(fmt.decimal, ".", regex=False)
        return pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)

    values = {q: lenient(c.column) for q, c in columns.items()}
    bad = np.zeros(len(frame), dtype=bool)
    for v in values.values():
        bad |= ~np.isfinite(v)
    if not bad.any():
        return values, lines, ()
    if fmt.untidy_rows == "refuse" or bad.all():
        for c in columns.values():  # raises with the first line and column at fault
            _numeric(path, fmt, frame, c.column, lines)
    rows = np.flatnonzero(bad)
    at = [lines[i] if lines else i + 1 for i in rows[:3]]
    note = (f"untidy readings file: {rows.size} row(s) with a blank or non-numeric value in a mapped column left out "
            f"of the analysis, first at line(s) {', '.join(map(str, at))} of {path.name}; the raw file is unchanged "
            "(csv.untidy_rows = \"refuse\" stops on them instead)")
    keep = ~bad
    return {q: v[keep] for q, v in values.items()}, [n for n, k in zip(lines, keep, strict=True) if k], (note,)


def _values(path: Path, fmt: CsvFormat, data: bytes, columns: Mapping[str, ColumnSpec]
            ) -> tuple[dict[str, np.ndarray], int, np.ndarray | None, tuple[str, ...]]:
    """Raw numbers of every mapped column, the first data line, the line of each row, and notes on left-out rows."""
    if fmt.format == "xlsx":
        frame, header_line, lines = _xlsx_frame(path, fmt, data)
        _check_columns(path, columns, list(frame.columns), header_line)
        _unique_header(path, list(frame.columns), header_line)
        values, lines, notes = _tidy(path, fmt, frame, columns, lines)
        return values, (lines[0] if lines else header_line + 1), np.asarray(lines, dtype=np.int64), notes
    _binary_junk(path, data)
    fast = _header_line_fast(data, fmt.header_row)
    if fast is not None:  # fast path: C parser, numeric columns, consecutive lines
        try:
            header = list(pd.read_csv(io.BytesIO(data), sep=fmt.delimiter, skiprows=fmt.header_row, nrows=0,
                                      skipinitialspace=True, encoding=fmt.encoding).columns)
            _check_columns(path, columns, header, fast[0])
            _unique_header(path, header, fast[0])
            wanted = list(dict.fromkeys(c.column for c in columns.values()))
            frame = _read_csv(path, fmt, data, wanted, as_text=False)
        except UnicodeDecodeError:
            _decode(path, fmt, data)  # raises with the byte position
            raise
        except (pd.errors.ParserError, pd.errors.EmptyDataError, LookupError):
            frame = None  # type: ignore[assignment]  # the slow path below says what is wrong
        if frame is not None:
            values = {q: frame[c.column].to_numpy() for q, c in columns.items()}
            if all(v.dtype.kind in "fiu" for v in values.values()):
                floats = {q: v.astype(float, copy=False) for q, v in values.items()}
                if all(np.isfinite(v).all() for v in floats.values()):
                    return floats, fast[0] + 1, None, ()
    text = _decode(path, fmt, data)  # slow path: locate the line at fault
    header_line, lines = _line_numbers(text, fmt.header_row)
    if not text.strip():
        raise ReadingsError(f"{path}: the file is empty. Ask the laboratory for the readings, or remove this stage.")
    frame = _read_csv(path, fmt, text, None, as_text=True)
    _check_columns(path, columns, list(frame.columns), header_line)
    _unique_header(path, list(frame.columns), header_line)
    blank = lines[-1] - lines[0] + 1 - len(lines) if lines else 0  # pandas skips blank lines: count them here
    values, lines, notes = _tidy(path, fmt, frame, columns, lines)
    if blank > 0:
        notes += (f"untidy readings file: {blank} blank line(s) among the readings of {path.name} skipped",)
    return values, (lines[0] if lines else header_line + 1), np.asarray(lines, dtype=np.int64), notes


def _time_order(path: Path, fmt: CsvFormat, column: str, time_s: np.ndarray,
                line: Callable[[int], int]) -> tuple[str, ...]:
    bad = np.flatnonzero(np.diff(time_s) <= 0)
    if not bad.size:
        return ()
    i = int(bad[0]) + 1
    kind = "repeats" if time_s[i] == time_s[i - 1] else "goes back from"
    where = f"line {line(i)}, column {column!r}"
    fact = (f"time {kind} the previous reading ({time_s[i - 1]:g} s then {time_s[i]:g} s; {bad.size} reading(s) out "
            "of order)")
    what = f"{path}, {where}: {fact}"
    if fmt.time_order == "strict":
        raise ReadingsError(f"{what}. Ask the laboratory for a corrected file, or set csv.time_order = \"flag\" in the "
                            "project file to read it anyway with a flag.")
    return (f"timestamps do not increase: {where} of {path.name}: {fact}; the readings are used in file order",)


def read_table(path: Path, relpath: str, label: str, fmt: CsvFormat, columns: Mapping[str, ColumnSpec],
               min_rows: int = MIN_SHEAR_ROWS, kind: str = "shear") -> StageReadings:
    """Read one readings file with its column map into canonical units (see :class:`StageReadings`).

    Raises
    ------
    ReadingsError
        Naming the file, line and column when the file is empty, a column is missing, a value is
        not a number or the times do not increase.
    """
    if not path.is_file():
        raise ReadingsError(f"{path}: readings file of {label} not found. Check 'file' in the project file.")
    data = path.read_bytes()
    if not data.strip():
        raise ReadingsError(f"{path}: the file is empty. Ask the laboratory for the readings, or remove this stage.")
    raw, first, lines, untidy = _values(path, fmt, data, columns)
    n = len(next(iter(raw.values())))
    if n == 0:
        raise ReadingsError(f"{path}: the header (line {first - 1}) has no data rows below it. Check csv.header_row "
                            "or ask the laboratory for the complete file.")
    if n < min_rows:
        raise ReadingsError(f"{path}: only {n} data rows; a {kind} stage needs many more. Check csv.header_row.")
    out: dict[str, np.ndarray] = {}
    range_notes: list[str] = []
    for quantity, spec in columns.items():
        values = raw[quantity]
        if spec.zero:
            values = values - spec.zero
        if spec.calibration is not None:  # divisions -> calibrated value (its own unit) -> canonical
            from .calibration import evaluate, outside_range, range_note

            out[CANONICAL_COLUMNS[quantity] + "_div"] = values
            if outside_range(spec.calibration, values).any():
                at = f"at line {_first_line(values, spec.calibration, first, lines)} of {path.name}"
                range_notes.append(str(range_note(spec.calibration, values, f"{quantity} ({spec.column!r})", at)))
            values = evaluate(spec.calibration, values)
        values = values * spec.factor if spec.factor != 1.0 else values
        if quantity == "vertical_displacement" and not spec.dilation_positive:
            values = -values
        out[CANONICAL_COLUMNS[quantity]] = values
    readings = StageReadings(label, pd.DataFrame(out, copy=False), hashlib.sha256(data).hexdigest(), len(data), relpath,
                             first, lines)
    readings, repeats = _repeated_times(path, fmt, readings)
    times = () if "time" not in columns else _time_order(path, fmt, columns["time"].column,
                                                         readings.table["time_s"].to_numpy(), readings.line)
    notes = (*untidy, *repeats, *times, *range_notes)
    return readings if not notes else StageReadings(**{**readings.__dict__, "notes": notes})


def _first_line(values: np.ndarray, cal: CalibrationSpec, first: int, lines: np.ndarray | list[int] | None) -> int:
    from .calibration import outside_range

    i = int(np.flatnonzero(outside_range(cal, values))[0])
    return int(lines[i]) if lines is not None else first + i


def _repeated_times(path: Path, fmt: CsvFormat, readings: StageReadings) -> tuple[StageReadings, tuple[str, ...]]:
    """Readings whose time repeats the previous one (a logger that splits or restarts its file) are left out with
    a note, unless csv.untidy_rows = "refuse" (then csv.time_order decides, as for times that go back)."""
    if "time_s" not in readings.table:  # a hand-logged sheet without times: nothing to repeat
        return readings, ()
    t = readings.table["time_s"].to_numpy()
    repeat = np.flatnonzero(np.diff(t) == 0) + 1
    if fmt.untidy_rows == "refuse" or not repeat.size:
        return readings, ()
    keep = np.ones(len(t), dtype=bool)
    keep[repeat] = False
    at = ", ".join(str(readings.line(int(i))) for i in repeat[:3])
    lines = readings.lines if readings.lines is not None else np.arange(len(t)) + readings.first_data_line
    kept = StageReadings(**{**readings.__dict__, "table": readings.table[keep].reset_index(drop=True),
                            "lines": np.asarray(lines)[keep]})
    return kept, (f"untidy readings file: {repeat.size} reading(s) repeating the previous time left out of the "
                  f"analysis, first at line(s) {at} of {path.name}; the raw file is unchanged",)


def read_stage(stage: StageSpec) -> StageReadings:
    """Read the (shear) readings file of ``stage`` into canonical units."""
    r = read_table(stage.file, stage.relpath, f"stage {stage.id!r}", stage.csv, stage.columns)
    if stage.apparatus is None:
        return StageReadings(**{**r.__dict__, "stage_id": stage.id})
    from .apparatus import apply_corrections  # box friction, ring deflection, compliance (kept as columns)

    table, notes = apply_corrections(stage, r.table)
    return StageReadings(**{**r.__dict__, "stage_id": stage.id, "table": table, "notes": (*r.notes, *notes)})


def read_consolidation(stage: StageSpec) -> StageReadings | None:
    """Read the consolidation (time-settlement) readings of ``stage``, or None when it has none."""
    c = stage.consolidation
    if c is None:
        return None
    r = read_table(c.file, c.relpath, f"the consolidation stage of {stage.id!r}", c.csv, c.columns,
                   MIN_CONSOLIDATION_ROWS, "consolidation")
    return StageReadings(**{**r.__dict__, "stage_id": stage.id})
