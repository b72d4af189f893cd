"""Creating a project from a folder of laboratory files and a small specimen table.

``import_folder(folder, specimens, output)`` reads the specimen table (one row per stage), guesses
each readings file's layout and column map (:mod:`kernels_helpers.sniff`), copies the raw files
byte for byte into ``output/readings/`` and writes ``output/project.toml``. The project is built
in a hidden folder beside ``output``, loaded and read back in full, and only then renamed into
place: a failed import leaves nothing behind. The source folder is only ever read.

The specimen table (CSV, comma or semicolon) has a header row and one row per stage:

* ``file`` (required): the readings file, relative to ``folder``; ``id`` (default: its stem),
  ``test_set``, ``stratum``, ``test_type``, ``description``;
* ``shape`` (square|circular), ``side_mm`` or ``diameter_mm``, ``height_mm``, ``dry_mass_g``,
  ``gs``; optional ``consolidation_settlement_mm``, ``max_particle_mm``, ``water_content_pct``;
* the normal load: exactly one of ``force_n``, ``stress_kpa``, ``hanger_mass_kg`` (with
  ``lever_ratio``);
* ``dilation`` (positive|negative): which way the vertical gauge reads on dilation (or the
  ``dilation`` option for every row) - never guessed;
* optional ``consolidation_file`` (its gauge reads like the shear one unless
  ``consolidation_dilation`` says otherwise), ``sheet`` (xlsx), ``time_order`` (strict|flag);
* optional per-quantity ``<quantity>_column``, ``<quantity>_unit`` and ``<quantity>_zero`` (zero
  offset in the file's unit), e.g. ``vertical_displacement_zero``.
"""

from __future__ import annotations

import csv
import hashlib
import json
import os
import shutil
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from .atomic import write_text_atomic
from .errors import ImportFolderError, ShearbookError
from .project import PROJECT_FILE, SCHEMA, load_project
from .readings import read_consolidation, read_stage
from .sniff import ColumnGuess, Layout, guess_columns, sniff_layout
from .units import QUANTITY_OF

__all__ = ["ImportOptions", "import_folder", "read_specimen_table"]

SHEAR_REQUIRED = ("time", "horizontal_displacement", "vertical_displacement", "shear_force|shear_stress")
CONSOLIDATION_REQUIRED = ("time", "vertical_displacement")
CONSOLIDATION_QUANTITIES = ("time", "vertical_displacement")
POSITIVE = ("side_mm", "diameter_mm", "height_mm", "dry_mass_g", "gs", "max_particle_mm", "force_n", "stress_kpa",
            "hanger_mass_kg", "lever_ratio")
NUMBERS = (*POSITIVE, "consolidation_settlement_mm", "water_content_pct")
TEXT = ("id", "test_set", "stratum", "test_type", "description")


@dataclass(frozen=True)
class ImportOptions:
    """What the caller says explicitly for every file (the specimen table wins per row)."""

    dilation: str | None = None  # "positive" | "negative"
    columns: Mapping[str, str] | None = None  # quantity -> header
    units: Mapping[str, str] | None = None  # quantity -> unit
    name: str = ""


@dataclass(frozen=True)
class _Row:
    line: int  # 1-based line of the row in the specimen table
    values: dict[str, str]


def read_specimen_table(path: Path) -> tuple[list[_Row], str]:
    """Rows of the specimen table (header names lower-cased, cells stripped) and its delimiter."""
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except OSError as exc:
        raise ImportFolderError(f"{path}: cannot read the specimen table ({exc.strerror}).") from exc
    except UnicodeDecodeError:
        text = path.read_bytes().decode("latin-1")
    lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
    filled = [(i + 1, line) for i, line in enumerate(lines) if line.strip() and not line.lstrip().startswith("#")]
    if len(filled) < 2:
        raise ImportFolderError(f"{path}: the specimen table needs a header row and one row per stage.")
    delim = ";" if filled[0][1].count(";") > filled[0][1].count(",") else ","
    header = [h.strip().lower() for h in next(csv.reader([filled[0][1]], delimiter=delim))]
    if "file" not in header:
        raise ImportFolderError(f"{path}, line {filled[0][0]}: the specimen table needs a 'file' column naming each "
                                f"readings file. Header has: {', '.join(header)}.")
    rows = []
    for number, line in filled[1:]:
        cells = [c.strip() for c in next(csv.reader([line], delimiter=delim))]
        if len(cells) > len(header):
            raise ImportFolderError(f"{path}, line {number}: {len(cells)} cells but the header has {len(header)}.")
        rows.append(_Row(number, {h: c for h, c in zip(header, cells, strict=False) if c}))
    return rows, delim


def _number(table: Path, row: _Row, key: str, decimal_comma: bool) -> float | None:
    cell = row.values.get(key)
    if cell is None:
        return None
    try:
        value = float(cell.replace(",", ".") if decimal_comma else cell)
    except ValueError:
        raise ImportFolderError(f"{table}, line {row.line}, column {key!r}: {cell!r} is not a number. "
                                "Correct the specimen table.") from None
    if key in POSITIVE and not value > 0:
        raise ImportFolderError(f"{table}, line {row.line}, column {key!r}: {cell!r} must be positive. "
                                "Correct the specimen table (lengths in mm, masses in g or kg as named).")
    if value != value or value in (float("inf"), float("-inf")):
        raise ImportFolderError(f"{table}, line {row.line}, column {key!r}: {cell!r} is not a finite number.")
    return value


def _q(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)  # a JSON string is a valid TOML basic string


def _sense(table: Path, row: _Row, key: str, default: str | None, readings: Path) -> str:
    sense = row.values.get(key, default)
    if sense not in ("positive", "negative"):
        got = f"{sense!r} is not positive|negative" if sense else "not given"
        raise ImportFolderError(
            f"{table}, line {row.line}, column {key!r}: which way the vertical gauge of {readings.name} reads on "
            f"dilation is {got}. Add a '{key}' column (positive: the reading grows when the specimen gets taller; "
            "negative: it falls) or pass --dilation. Shearbook never guesses it."
        )
    return sense


def _explicit(row: _Row, options: ImportOptions) -> tuple[dict[str, str], dict[str, str], str]:
    cols = dict(options.columns or {})
    units = dict(options.units or {})
    unknown = sorted(set(cols) - set(QUANTITY_OF) | set(units) - set(QUANTITY_OF))
    if unknown:
        raise ImportFolderError(f"--column/--unit: unknown quantity {unknown[0]!r}. Known quantities: "
                                f"{', '.join(QUANTITY_OF)}.")
    for q in QUANTITY_OF:
        if f"{q}_column" in row.values:
            cols[q] = row.values[f"{q}_column"]
        if f"{q}_unit" in row.values:
            units[q] = row.values[f"{q}_unit"]
    return cols, units, "given in the specimen table or as an option"


def _columns_toml(table_name: str, guesses: Mapping[str, ColumnGuess], sense: str, zeros: Mapping[str, float]) -> str:
    out = [f"[{table_name}]"]
    for q, g in guesses.items():
        extra, basis = "", g.basis
        if q == "vertical_displacement":
            extra, basis = f", dilation = {_q(sense)}", basis + "; dilation sense as given (table or --dilation)"
        if q in zeros:
            extra, basis = extra + f", zero = {zeros[q]!r}", basis + "; zero offset from the specimen table"
        out.append(f"{q} = {{ column = {_q(g.column)}, unit = {_q(g.unit)}{extra} }}  # {basis}")
    return "\n".join(out) + "\n"


def _csv_toml(table_name: str, layout: Layout, row: _Row) -> str:
    out = [f"[{table_name}]", f"format = {_q(layout.format)}"]
    if layout.format == "text":
        out += [f"delimiter = {_q(layout.delimiter)}", f"decimal = {_q(layout.decimal)}",
                f"encoding = {_q(layout.encoding)}"]
    elif row.values.get("sheet"):
        out.append(f"sheet = {_q(row.values['sheet'])}")
    out.append(f"header_row = {layout.header_row}  # 0-based; {layout.n_preamble} preamble line(s) above it")
    if row.values.get("time_order"):
        out.append(f"time_order = {_q(row.values['time_order'])}")
    return "\n".join(out) + "\n"


def _readings_file(folder: Path, table: Path, row: _Row, key: str) -> Path:
    name = row.values[key]
    path = (folder / name).resolve()
    if not path.is_relative_to(folder) or path.parent != folder:
        raise ImportFolderError(f"{table}, line {row.line}, column {key!r}: {name!r} is not a file directly in "
                                f"{folder}. Put the readings file in the folder and name it without a path.")
    if not path.is_file():
        raise ImportFolderError(f"{table}, line {row.line}, column {key!r}: {path} not found. Correct the name.")
    return path


def _stage_toml(folder: Path, table: Path, row: _Row, options: ImportOptions,
                decimal_comma: bool) -> tuple[str, list[Path]]:
    path = _readings_file(folder, table, row, "file")
    nums = {k: _number(table, row, k, decimal_comma) for k in NUMBERS}
    shape = row.values.get("shape", "")
    size_key = {"square": "side_mm", "circular": "diameter_mm"}.get(shape)
    if size_key is None:
        raise ImportFolderError(f"{table}, line {row.line}, column 'shape': {shape!r} is not square or circular.")
    for key in (size_key, "height_mm", "dry_mass_g", "gs"):
        if nums[key] is None:
            raise ImportFolderError(f"{table}, line {row.line}, column {key!r}: missing. Add it to the specimen table.")
    loads = [k for k in ("force_n", "stress_kpa", "hanger_mass_kg") if nums[k] is not None]
    if len(loads) != 1:
        raise ImportFolderError(f"{table}, line {row.line}: give exactly one of force_n, stress_kpa or hanger_mass_kg "
                                f"(with lever_ratio) for the normal load; found {loads or 'none'}.")
    sense = _sense(table, row, "dilation", options.dilation, path)
    data = path.read_bytes()
    layout = sniff_layout(path, data, row.values.get("sheet", ""))
    cols, units, source = _explicit(row, options)
    guesses = guess_columns(path, layout.header, SHEAR_REQUIRED, cols, units, source)
    zeros = {q: z for q in guesses if (z := _number(table, row, f"{q}_zero", decimal_comma)) is not None}
    stage_id = row.values.get("id", path.stem)
    head = ["\n[[stage]]", f"id = {_q(stage_id)}", f"file = {_q('readings/' + path.name)}"]
    head += [f"{k} = {_q(row.values[k])}" for k in TEXT[1:] if k in row.values]
    files = [path]
    cons = None
    if "consolidation_file" in row.values:
        cpath = _readings_file(folder, table, row, "consolidation_file")
        files.append(cpath)
        head.append(f"consolidation_file = {_q('readings/' + cpath.name)}")
        csense = _sense(table, row, "consolidation_dilation", sense, cpath)
        clayout = sniff_layout(cpath, cpath.read_bytes(), "", min_fields=2)
        ccols = {q: row.values[f"consolidation_{q}_column"] for q in CONSOLIDATION_QUANTITIES
                 if f"consolidation_{q}_column" in row.values}
        cunits = {q: row.values[f"consolidation_{q}_unit"] for q in CONSOLIDATION_QUANTITIES
                  if f"consolidation_{q}_unit" in row.values}
        cguess = guess_columns(cpath, clayout.header, CONSOLIDATION_REQUIRED, ccols, cunits,
                               "given in the specimen table")
        cguess = {q: cguess[q] for q in CONSOLIDATION_QUANTITIES}
        cons = _csv_toml("stage.consolidation_csv", clayout, _Row(row.line, {})) + _columns_toml(
            "stage.consolidation_columns", cguess, csense, {})
    spec = ["[stage.specimen]", f"shape = {_q(shape)}"]
    spec += [f"{k} = {nums[k]!r}" for k in (size_key, "height_mm", "dry_mass_g", "gs", "consolidation_settlement_mm",
                                             "max_particle_mm", "water_content_pct") if nums[k] is not None]
    load = ["[stage.normal_load]", f"{loads[0]} = {nums[loads[0]]!r}"]
    if loads[0] == "hanger_mass_kg":
        load.append(f"lever_ratio = {nums['lever_ratio'] if nums['lever_ratio'] is not None else 1.0!r}")
    text = "\n".join(head + spec + load) + "\n" + _csv_toml("stage.csv", layout, row)
    text += _columns_toml("stage.columns", guesses, sense, zeros) + (cons or "")
    return text, files


def _write_atomic(path: Path, text: str) -> None:
    write_text_atomic(path, text)


def _copy_exact(src: Path, dst: Path) -> None:
    digest = hashlib.sha256(src.read_bytes()).hexdigest()
    shutil.copy2(src, dst)
    if hashlib.sha256(dst.read_bytes()).hexdigest() != digest:
        raise ImportFolderError(f"{dst}: the copy of {src} differs from the original; check the disk and try again.")


def _project_text(folder: Path, table: Path, options: ImportOptions) -> tuple[str, list[Path]]:
    if not table.is_file():
        raise ImportFolderError(f"{table}: no such specimen table.")
    rows, delim = read_specimen_table(table)
    decimal_comma = delim == ";"
    name = options.name or folder.name
    parts = [f"# Made by `shearbook import` from {folder.name}/ and {table.name}: check the column map below.\n",
             f"schema = {_q(SCHEMA)}\n\n[project]\nname = {_q(name)}\n"]
    files: list[Path] = []
    ids: dict[str, int] = {}
    for row in rows:
        text, used = _stage_toml(folder, table, row, options, decimal_comma)
        sid = row.values.get("id", Path(row.values["file"]).stem)
        if sid in ids:
            raise ImportFolderError(f"{table}, line {row.line}, column 'id': {sid!r} repeats line {ids[sid]}. "
                                    "Give each stage its own id.")
        ids[sid] = row.line
        parts.append(text)
        files += [p for p in used if p not in files]
    return "".join(parts), files


def import_folder(folder: str | Path, specimens: str | Path, output: str | Path,
                  options: ImportOptions | None = None) -> Path:
    """Create the project folder ``output`` from ``folder`` and the specimen table ``specimens``.

    Returns the project folder. Raises :class:`ImportFolderError` (or another
    :class:`ShearbookError`) naming the file, line and column when something must be said
    explicitly; nothing is written then.
    """
    options = options or ImportOptions()
    src, table, out = Path(folder).resolve(), Path(specimens).resolve(), Path(output).resolve()
    if not src.is_dir():
        raise ImportFolderError(f"{src}: no such folder of readings files.")
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise ImportFolderError(f"{out}: already exists and is not empty. Choose a new project folder.")
    if out == src or out.is_relative_to(src):
        raise ImportFolderError(f"{out}: the project folder must not be inside the folder of raw files {src}.")
    text, files = _project_text(src, table, options)
    staging = out.with_name(f".{out.name}.importing-{os.getpid()}")
    shutil.rmtree(staging, ignore_errors=True)
    try:
        (staging / "readings").mkdir(parents=True)
        for f in files:
            _copy_exact(f, staging / "readings" / f.name)
        _write_atomic(staging / PROJECT_FILE, text)
        project = load_project(staging)
        for stage in project.stages:  # every file must read with the map just written
            read_stage(stage)
            read_consolidation(stage)
    except ShearbookError as exc:
        shutil.rmtree(staging, ignore_errors=True)
        message = str(exc).replace(str(staging / "readings"), str(src)).replace(str(staging), f"{out} (being made)")
        raise type(exc)(message) from exc
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    if out.exists():
        out.rmdir()
    os.replace(staging, out)
    return out
