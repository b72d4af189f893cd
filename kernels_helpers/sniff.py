"""Guessing how a laboratory readings file is laid out and what its columns hold.

Pure functions on the file's bytes: the encoding (UTF-8 with or without BOM, else Latin-1), the
delimiter (comma, semicolon or tab; or an ``.xlsx`` sheet), the decimal mark, the header row below
any free-text preamble, and for each header its quantity and unit. Every guess that is not
unambiguous raises :class:`~kernels_helpers.errors.ImportFolderError` naming the file, the header
and the candidates, and saying how to state it explicitly.

Rules
-----
* Header row: the first line that splits (with one delimiter) into three (two for a
  consolidation file) or more fields, at
  least one of them not a number, followed by lines with the same number of fields that are all
  numbers. Preamble lines above it are kept in the file and skipped on reading.
* Decimal mark: ``.`` for comma-delimited files; ``,`` for semicolon or tab files whose numbers
  use a comma; a file mixing both marks is refused.
* Unit: the text in brackets at the end of a header, ``Time (min)``, ``Load [kN]``, or a last
  word that is a known unit, ``x_mm``, ``Time min``. Quantity: the unit's dimension, then the
  words (horizontal/shear/x or vertical/normal/y/dial/gauge/settlement).
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from .errors import ImportFolderError
from .units import DIMENSION_OF, QUANTITY_OF

__all__ = ["ColumnGuess", "Layout", "guess_columns", "parse_header", "sniff_layout"]

SCAN_LINES = 200
DELIMITERS = {",": "comma", ";": "semicolon", "\t": "tab"}
_NUMBER = re.compile(r"^[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?$")
_BRACKETED = re.compile(r"^(?P<label>.*?)[\s_,]*[\(\[]\s*(?P<unit>[^\(\)\[\]]*?)\s*[\)\]]\s*$")
STRONG_H, STRONG_V = {"horizontal", "horiz", "lateral"}, {"vertical", "vert", "settlement", "dial", "height"}
WEAK_H, WEAK_V = {"shear", "x", "dx", "h"}, {"normal", "y", "dy", "v", "gauge", "gage", "axial"}


@dataclass(frozen=True)
class Layout:
    """How a readings file is laid out (the ``[stage.csv]`` table of the project file)."""

    format: str  # "text" or "xlsx"
    encoding: str
    delimiter: str
    decimal: str
    header_row: int  # 0-based line (text) or sheet row (xlsx) of the header
    header: tuple[str, ...]
    n_preamble: int  # non-blank lines above the header


@dataclass(frozen=True)
class ColumnGuess:
    """One quantity of the column map and how it was found."""

    quantity: str
    column: str
    unit: str
    basis: str  # e.g. "guessed from the header", "given in the specimen table"


def _is_number(cell: object) -> bool:
    if isinstance(cell, bool):
        return False
    if isinstance(cell, int | float):
        return True
    return bool(_NUMBER.match(str(cell).strip()))


def _split(line: str, delimiter: str) -> list[str]:
    try:
        return [f.strip() for f in next(csv.reader([line], delimiter=delimiter))]
    except (csv.Error, StopIteration):
        return []


def _decode(data: bytes) -> tuple[str, str]:
    try:
        return data.decode("utf-8-sig"), "utf-8-sig"
    except UnicodeDecodeError:
        return data.decode("latin-1"), "latin-1"  # every byte is a Latin-1 character: never fails


def _find_header(rows: Sequence[Sequence[object]], min_fields: int = 3) -> tuple[int, int] | None:
    """(index of the header row, number of data rows checked after it), or None."""
    filled = [i for i, r in enumerate(rows) if any(str(c).strip() for c in r)]
    for k, i in enumerate(filled):
        head = [str(c).strip() for c in rows[i]]
        width = len(head)
        if width < min_fields or all(_is_number(c) for c in head if c) or not any(head):
            continue
        after = [rows[j] for j in filled[k + 1 : k + 6]]
        ok = [len(r) == width and all(_is_number(c) for c in r if str(c).strip()) and
              sum(1 for c in r if str(c).strip()) >= min_fields for r in after]
        if after and all(ok):
            return i, len(after)
    return None


def _text_layout(path: Path, data: bytes, min_fields: int) -> Layout:
    text, encoding = _decode(data)
    lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")[:SCAN_LINES]
    found: dict[str, int] = {}
    for d in DELIMITERS:
        hit = _find_header([_split(line, d) if line.strip() else [] for line in lines], min_fields)
        if hit is not None:
            found[d] = hit[0]
    if not found:
        filled = [i for i, line in enumerate(lines) if line.strip()]
        if not filled:
            raise ImportFolderError(f"{path}: the file is empty. Ask the laboratory for the readings, or move the "
                                    "file out of the folder.")
        last = filled[-1]
        if any(len(_split(lines[last], d)) >= min_fields for d in DELIMITERS) and len(filled) <= SCAN_LINES:
            raise ImportFolderError(f"{path}: line {last + 1} looks like a header but no data rows follow it. "
                                    "Ask the laboratory for the complete file.")
        raise ImportFolderError(
            f"{path}: no header row followed by rows of numbers (comma, semicolon or tab delimited) in the first "
            f"{SCAN_LINES} lines. Check the file is a readings file, or write its [stage.csv] table by hand."
        )
    first = min(found.values())
    delims = [d for d, i in found.items() if i == first]
    if len(delims) > 1:
        names = " or ".join(DELIMITERS[d] for d in delims)
        raise ImportFolderError(f"{path}: line {first + 1} could be split by {names}. Give csv.delimiter in the "
                                "project file by hand.")
    delim = delims[0]
    header = tuple(_split(lines[first], delim))
    data_cells = [c for line in lines[first + 1 :] if line.strip() for c in _split(line, delim)]
    dots = any("." in c for c in data_cells)
    commas = delim != "," and any("," in c for c in data_cells)
    if dots and commas:
        raise ImportFolderError(f"{path}: numbers below the header (line {first + 1}) use both '.' and ',' as "
                                "marks. Set csv.decimal by hand in the project file.")
    n_pre = sum(1 for line in lines[:first] if line.strip())
    return Layout("text", encoding, delim, "," if commas else ".", first, header, n_pre)


def _xlsx_layout(path: Path, data: bytes, sheet: str, min_fields: int) -> Layout:
    import openpyxl

    try:
        book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # not a zip, not a workbook, broken XML: all say the same to the user
        raise ImportFolderError(f"{path}: not a readable .xlsx workbook ({type(exc).__name__}). Save it again as "
                                ".xlsx or as CSV.") from exc
    try:
        if sheet and sheet not in book.sheetnames:
            raise ImportFolderError(f"{path}: no sheet {sheet!r}; the workbook has {book.sheetnames}. Correct the "
                                    "sheet column of the specimen table.")
        ws = book[sheet] if sheet else book.worksheets[0]
        rows = [["" if v is None else v for v in r]
                for _, r in zip(range(SCAN_LINES), ws.iter_rows(values_only=True), strict=False)]
    finally:
        book.close()
    hit = _find_header(rows, min_fields)
    if hit is None:
        raise ImportFolderError(f"{path}: no header row followed by rows of numbers in the first {SCAN_LINES} rows "
                                f"of sheet {sheet or 'one'}. Check the sheet, or write [stage.csv] by hand.")
    i = hit[0]
    n_pre = sum(1 for r in rows[:i] if any(str(c).strip() for c in r))
    return Layout("xlsx", "utf-8", ",", ".", i, tuple(str(c).strip() for c in rows[i]), n_pre)


def sniff_layout(path: Path, data: bytes, sheet: str = "", min_fields: int = 3) -> Layout:
    """Guess the layout of a readings file from its bytes (see the module rules).

    ``min_fields``: fewest columns of the header and data rows (2 for time-settlement readings).
    """
    if path.suffix.lower() in (".xlsx", ".xlsm"):
        return _xlsx_layout(path, data, sheet, min_fields)
    return _text_layout(path, data, min_fields)


def parse_header(name: str) -> tuple[str, str | None]:
    """Split a header into its label and unit: ``"Shear load (kN)"`` -> ``("Shear load", "kN")``."""
    text = name.strip()
    m = _BRACKETED.match(text)
    if m and m.group("unit"):
        return m.group("label").strip(), m.group("unit").strip()
    parts = re.split(r"[\s_,]+", text)
    if len(parts) > 1 and parts[-1].lower() in DIMENSION_OF:
        return text[: len(text) - len(parts[-1])].rstrip(" _,"), parts[-1]
    return text, None


def _direction(words: set[str]) -> str | None:
    for strong_h, strong_v in ((STRONG_H, STRONG_V), (WEAK_H, WEAK_V)):
        h, v = bool(words & strong_h), bool(words & strong_v)
        if h != v:
            return "h" if h else "v"
        if h and v:
            return None
    return None


def classify(label: str, unit: str | None) -> str | None:
    """The quantity a header holds, from its unit's dimension and its words; None if unclear."""
    words = set(re.findall(r"[a-z]+", label.lower().replace("τ", " tau ").replace("σ", " sigma ")))  # noqa: RUF001 - Greek sigma in headers, on purpose
    dim = DIMENSION_OF.get(unit.strip().lower()) if unit else None
    if dim is None:  # no (known) unit: only words that say the quantity outright
        if words & {"time", "elapsed"}:
            dim = "time"
        elif words & {"displacement", "disp", "travel", "settlement", "deformation"}:
            dim = "length"
        elif words & {"force", "load"}:
            dim = "force"
        elif words & {"stress", "tau", "sigma"}:
            dim = "stress"
    if dim == "time":
        return "time"
    implied = ({"shear"} if "tau" in words else set()) | ({"normal"} if "sigma" in words else set())
    direction = _direction(words | implied)
    if dim is None or direction is None:
        return None
    names = {"length": ("horizontal_displacement", "vertical_displacement"), "force": ("shear_force", "normal_force"),
             "stress": ("shear_stress", "normal_stress")}[dim]
    return names[0] if direction == "h" else names[1]


def _how(quantity: str) -> str:
    return (f"Say it with --column {quantity}=\"HEADER\" (and --unit {quantity}=UNIT), or with "
            f"{quantity}_column (and {quantity}_unit) columns in the specimen table")


def guess_columns(path: Path, header: Sequence[str], required: Sequence[str], given_columns: Mapping[str, str],
                  given_units: Mapping[str, str], source: str) -> dict[str, ColumnGuess]:
    """The column map of one file: explicit columns first, then unambiguous guesses.

    ``required`` lists the quantities that must be found; ``"shear_force|shear_stress"`` means
    either. ``source`` says where the explicit values came from, for the record.
    """
    heads = [h for h in header if h]
    found: dict[str, list[tuple[str, str | None]]] = {}
    for h in heads:
        label, unit = parse_header(h)
        q = classify(label, unit)
        if q is not None:
            found.setdefault(q, []).append((h, unit))
    out: dict[str, ColumnGuess] = {}
    for q, column in given_columns.items():
        if column not in heads:
            raise ImportFolderError(f"{path}: the column {column!r} given for {q} ({source}) is not in the header. "
                                    f"Header has: {', '.join(repr(h) for h in heads)}.")
        unit = given_units.get(q) or parse_header(column)[1]
        out[q] = ColumnGuess(q, column, unit or "", f"column {source}")
    taken = {g.column for g in out.values()}
    for q, candidates in found.items():
        if q in out:
            continue
        free = [(h, u) for h, u in candidates if h not in taken]
        if len(free) > 1:
            names = ", ".join(repr(h) for h, _ in free)
            raise ImportFolderError(f"{path}: more than one column could be {q}: {names}. {_how(q)}.")
        if free:
            h, unit = free[0]
            basis = "guessed from the header" if unit and q not in given_units else f"unit {source}"
            out[q] = ColumnGuess(q, h, given_units.get(q) or unit or "", basis)
    for want in required:
        options = want.split("|")
        if not any(o in out for o in options):
            listing = ", ".join(repr(h) for h in heads)
            raise ImportFolderError(f"{path}: no column for {' or '.join(options)} among the headers {listing}. "
                                    f"{_how(options[0])}.")
    for g in out.values():
        if not g.unit:
            raise ImportFolderError(f"{path}: the header {g.column!r} ({g.quantity}) gives no unit. Say it with "
                                    f"--unit {g.quantity}=UNIT or a {g.quantity}_unit column in the specimen table.")
        if g.unit.strip().lower() not in DIMENSION_OF:
            raise ImportFolderError(f"{path}: unknown unit {g.unit!r} in header {g.column!r}. Say it with --unit "
                                    f"{g.quantity}=UNIT (e.g. mm, in, N, kN, lbf, kgf, kPa, psi, s, min).")
        if DIMENSION_OF[g.unit.strip().lower()] != QUANTITY_OF[g.quantity]:
            raise ImportFolderError(f"{path}: unit {g.unit!r} of {g.column!r} is not a {QUANTITY_OF[g.quantity]} unit, "
                                    f"as {g.quantity} needs. {_how(g.quantity)}.")
    return out
