"""The project file (``project.toml``): metadata, specimens, column maps and units.

A project is a folder a person can read: the project file, the raw readings files exactly as the
laboratory sent them, the interpretation file and the exported records. This module only reads
and validates the project file; it never touches the readings.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Final, Literal

from .errors import ProjectFileError, UnitError
from .units import QUANTITY_OF, to_canonical_factor

__all__ = [
    "PROJECT_FILE",
    "ColumnSpec",
    "ConsolidationSpec",
    "CsvFormat",
    "NormalLoad",
    "Project",
    "SampleSpec",
    "Specimen",
    "StageSpec",
    "load_project",
]

PROJECT_FILE: Final = "project.toml"
SCHEMA: Final = "shearbook.project/1"
G_N: Final = 9.80665  # standard gravity, m/s2 (exact by definition)
REQUIRED_COLUMNS: Final = ("time", "horizontal_displacement", "vertical_displacement")

Shape = Literal["square", "circular"]


@dataclass(frozen=True)
class Specimen:
    """Specimen geometry and phase data (mm, g)."""

    shape: Shape
    width_mm: float  # side of a square box or diameter of a circular one
    height_mm: float  # initial height, before consolidation
    dry_mass_g: float
    gs: float
    consolidation_settlement_mm: float | None = None  # declared; positive = compression. None: not declared
    max_particle_mm: float | None = None  # largest particle size d_max, when the laboratory gives it
    water_content_pct: float | None = None  # initial water content w in %, when given
    relative_density: float | None = None  # I_D as a fraction 0-1 (for Bolton's index), when given

    @property
    def area0_mm2(self) -> float:
        """Nominal (initial) plan area in mm2."""
        if self.shape == "square":
            return self.width_mm**2
        return math.pi * self.width_mm**2 / 4.0


@dataclass(frozen=True)
class NormalLoad:
    """Normal load on the specimen, reduced to a force in N (cap, plate and hanger included)."""

    force_n: float
    given_as: str  # what the project file gave, for the record, e.g. "stress_kpa = 50"


@dataclass(frozen=True)
class ColumnSpec:
    """How one canonical quantity is read from a readings file."""

    quantity: str
    column: str
    unit: str
    factor: float  # multiply the file's values by this to get canonical units
    dilation_positive: bool = True  # vertical gauge only: False when it reads down on dilation
    zero: float = 0.0  # zero offset in the file's unit: canonical = (reading - zero) x factor


@dataclass(frozen=True)
class CsvFormat:
    """Text layout of a readings file."""

    delimiter: str = ","
    decimal: str = "."
    header_row: int = 0  # 0-based line of the header; lines above it are preamble
    encoding: str = "utf-8-sig"
    format: Literal["text", "xlsx"] = "text"  # "xlsx" for a workbook (openpyxl); default by the file's suffix
    sheet: str = ""  # xlsx only: the sheet to read ("" = the first)
    time_order: Literal["strict", "flag"] = "strict"  # "flag": non-increasing times raise a flag, not an error
    # "flag": blank or non-numeric rows and repeated times are left out with a flag; "refuse": they are errors
    untidy_rows: Literal["flag", "refuse"] = "flag"


@dataclass(frozen=True)
class ConsolidationSpec:
    """The time-settlement readings of a stage's consolidation stage (optional)."""

    file: Path  # absolute path of the readings file
    relpath: str
    columns: Mapping[str, ColumnSpec]  # time and vertical_displacement (with its dilation sense)
    csv: CsvFormat


@dataclass(frozen=True)
class StageSpec:
    """One stage as declared in the project file."""

    id: str
    file: Path  # absolute path of the readings file
    relpath: str  # path as written in the project file (relative to the project folder)
    specimen: Specimen
    normal_load: NormalLoad
    columns: Mapping[str, ColumnSpec]
    csv: CsvFormat
    test_set: str = ""
    stratum: str = ""
    test_type: str = "single-stage"
    description: str = ""
    consolidation: ConsolidationSpec | None = None
    sample: SampleSpec | None = None  # [stage.sample]: where the specimen came from (AGS4 export)


@dataclass(frozen=True)
class SampleSpec:
    """Sample and specimen identification of a stage (``[stage.sample]``, every field optional; depths in m).

    Only the AGS4 export needs them (``ags4_export.py`` names any that is missing).
    """

    location_id: str | None = None  # borehole or pit, e.g. "BH03"
    sample_top_m: float | None = None  # depth to the top of the sample
    sample_ref: str | None = None
    sample_type: str | None = None  # AGS4 SAMP_TYPE code, e.g. "B" (bulk disturbed), "U" (undisturbed)
    sample_id: str = ""  # unique sample identifier, when the project uses one
    specimen_ref: str | None = None
    specimen_depth_m: float | None = None  # depth to the top of the specimen
    description: str = ""  # specimen description
    condition: str = ""  # "undisturbed" | "remoulded" | "" (not stated)


@dataclass(frozen=True)
class Project:
    """A project folder with its parsed project file."""

    root: Path
    meta: Mapping[str, Any]
    stages: tuple[StageSpec, ...]
    design_stress_range_kpa: tuple[float, float] | None = None
    raw: Mapping[str, Any] = field(default_factory=dict, repr=False)
    display_units: str = "SI"  # [display] units: "SI" or "US" (US customary); what is shown, never what is stored

    @property
    def name(self) -> str:
        return str(self.meta.get("name", self.root.name))

    def stage(self, stage_id: str) -> StageSpec:
        for s in self.stages:
            if s.id == stage_id:
                return s
        raise KeyError(f"no stage {stage_id!r} in project {self.root}")


def _merge(base: Mapping[str, Any], over: Mapping[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = dict(base)
    for key, value in over.items():
        if isinstance(value, Mapping) and isinstance(out.get(key), Mapping):
            out[key] = _merge(out[key], value)
        else:
            out[key] = value
    return out


class _Fields:
    """Typed access to one table of the project file, with errors that name the field."""

    def __init__(self, table: Mapping[str, Any], where: str) -> None:
        self.table, self.where = table, where

    def number(self, key: str, *, positive: bool = True, default: float | None = None) -> float:
        if key not in self.table:
            if default is not None:
                return default
            raise ProjectFileError(f"{self.where}: field {key!r} is missing. Add it to the project file.")
        value = self.table[key]
        if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
            raise ProjectFileError(f"{self.where}: field {key!r} must be a number, not {value!r}.")
        if positive and value <= 0:
            raise ProjectFileError(f"{self.where}: field {key!r} must be positive, not {value!r}.")
        return float(value)

    def text(self, key: str, default: str | None = None) -> str:
        value = self.table.get(key, default)
        if value is None:
            raise ProjectFileError(f"{self.where}: field {key!r} is missing. Add it to the project file.")
        if not isinstance(value, str):
            raise ProjectFileError(f"{self.where}: field {key!r} must be text, not {value!r}.")
        return value

    def table_of(self, key: str) -> Mapping[str, Any]:
        value = self.table.get(key, {})
        if not isinstance(value, Mapping):
            raise ProjectFileError(f"{self.where}: {key!r} must be a table.")
        return value


def _specimen(t: _Fields) -> Specimen:
    shape = t.text("shape")
    if shape == "square":
        width = t.number("side_mm")
    elif shape == "circular":
        width = t.number("diameter_mm")
    else:
        raise ProjectFileError(f"{t.where}: shape must be \"square\" or \"circular\", not {shape!r}.")
    return Specimen(
        shape=shape,
        width_mm=width,
        height_mm=t.number("height_mm"),
        dry_mass_g=t.number("dry_mass_g"),
        gs=t.number("gs"),
        consolidation_settlement_mm=(t.number("consolidation_settlement_mm", positive=False)
                                     if "consolidation_settlement_mm" in t.table else None),
        max_particle_mm=t.number("max_particle_mm") if "max_particle_mm" in t.table else None,
        water_content_pct=t.number("water_content_pct", positive=False) if "water_content_pct" in t.table else None,
        relative_density=_relative_density(t),
    )


def _relative_density(t: _Fields) -> float | None:
    if "relative_density" not in t.table:
        return None
    value = t.number("relative_density", positive=False)
    if not 0.0 <= value <= 1.0:
        raise ProjectFileError(
            f"{t.where}: field 'relative_density' is I_D as a fraction between 0 and 1 (e.g. 0.65), not {value!r}."
        )
    return value


def _sample(t: _Fields) -> SampleSpec | None:
    if not t.table:
        return None
    known = set(SampleSpec.__dataclass_fields__)
    unknown = sorted(set(t.table) - known)
    if unknown:
        raise ProjectFileError(
            f"{t.where}: unknown field(s) {', '.join(unknown)}. Known fields: {', '.join(sorted(known))}.")
    condition = t.text("condition", "")
    if condition not in ("", "undisturbed", "remoulded"):
        raise ProjectFileError(f"{t.where}: condition must be \"undisturbed\" or \"remoulded\", not {condition!r}.")

    def text(key: str) -> str | None:
        return t.text(key) if key in t.table else None

    def depth(key: str) -> float | None:
        if key not in t.table:
            return None
        value = t.number(key, positive=False)
        if value < 0:
            raise ProjectFileError(f"{t.where}: field {key!r} is a depth below ground in m (0 or more), not {value!r}.")
        return value

    return SampleSpec(
        location_id=text("location_id"), sample_top_m=depth("sample_top_m"), sample_ref=text("sample_ref"),
        sample_type=text("sample_type"), sample_id=t.text("sample_id", ""), specimen_ref=text("specimen_ref"),
        specimen_depth_m=depth("specimen_depth_m"), description=t.text("description", ""), condition=condition,
    )


def _normal_load(t: _Fields, specimen: Specimen) -> NormalLoad:
    given = [k for k in ("force_n", "stress_kpa", "hanger_mass_kg") if k in t.table]
    if len(given) != 1:
        raise ProjectFileError(
            f"{t.where}: give exactly one of force_n, stress_kpa or hanger_mass_kg (with lever_ratio); "
            f"found {given or 'none'}."
        )
    kind = given[0]
    value = t.number(kind)
    if kind == "force_n":
        return NormalLoad(value, f"force_n = {value:g} N")
    if kind == "stress_kpa":  # on the nominal area: kPa x mm2 / 1000 = N
        return NormalLoad(value * specimen.area0_mm2 / 1000.0, f"stress_kpa = {value:g} kPa on the nominal area")
    lever = t.number("lever_ratio", default=1.0)
    return NormalLoad(value * lever * G_N, f"hanger_mass_kg = {value:g} kg x lever_ratio {lever:g} x g_n")


def _columns(t: _Fields, file_label: str, consolidation: bool = False) -> dict[str, ColumnSpec]:
    cols: dict[str, ColumnSpec] = {}
    for quantity, spec in t.table.items():
        where = f"{t.where}.{quantity}"
        if quantity not in QUANTITY_OF:
            known = ", ".join(QUANTITY_OF)
            raise ProjectFileError(f"{where}: unknown quantity {quantity!r}. Known quantities: {known}.")
        if not isinstance(spec, Mapping):
            raise ProjectFileError(f"{where}: must be a table like {{ column = \"...\", unit = \"...\" }}.")
        f = _Fields(spec, where)
        unit = f.text("unit")
        sense = f.text("dilation", "positive") if quantity == "vertical_displacement" else "positive"
        if sense not in ("positive", "negative"):
            raise ProjectFileError(f"{where}: dilation must be \"positive\" or \"negative\", not {sense!r}.")
        if quantity == "vertical_displacement" and "dilation" not in spec:
            raise ProjectFileError(
                f"{where}: say which way the vertical gauge reads on dilation: add dilation = \"positive\" "
                "(reading grows when the specimen gets taller) or \"negative\". Shearbook never guesses it."
            )
        try:
            factor = to_canonical_factor(unit, quantity, f"{where} ({file_label})")
        except UnitError as exc:  # load_project raises ProjectFileError for anything wrong in the file
            raise ProjectFileError(str(exc)) from exc
        cols[quantity] = ColumnSpec(
            quantity=quantity,
            column=f.text("column"),
            unit=unit,
            factor=factor,
            dilation_positive=sense == "positive",
            zero=f.number("zero", positive=False, default=0.0),
        )
    if consolidation:  # time and settlement only (settlement = compression = -vertical displacement)
        missing = [q for q in ("time", "vertical_displacement") if q not in cols]
    else:
        missing = [q for q in REQUIRED_COLUMNS if q not in cols]
    if not consolidation and "shear_force" not in cols and "shear_stress" not in cols:
        missing.append("shear_force (or shear_stress)")
    if missing:
        raise ProjectFileError(f"{t.where}: the column map lacks {', '.join(missing)}.")
    return cols


def _csv(t: _Fields, default_format: str = "text") -> CsvFormat:
    header_row = t.table.get("header_row", 0)
    if not isinstance(header_row, int) or isinstance(header_row, bool) or header_row < 0:
        raise ProjectFileError(f"{t.where}: header_row must be a whole number >= 0, not {header_row!r}.")
    fmt = t.text("format", default_format)
    if fmt not in ("text", "xlsx"):
        raise ProjectFileError(f"{t.where}: format must be \"text\" or \"xlsx\", not {fmt!r}.")
    order = t.text("time_order", "strict")
    if order not in ("strict", "flag"):
        raise ProjectFileError(f"{t.where}: time_order must be \"strict\" or \"flag\", not {order!r}.")
    return CsvFormat(
        delimiter=t.text("delimiter", ","),
        decimal=t.text("decimal", "."),
        header_row=header_row,
        encoding=t.text("encoding", "utf-8-sig"),
        format=fmt,  # type: ignore[arg-type]
        sheet=t.text("sheet", ""),
        time_order=order,  # type: ignore[arg-type]
        untidy_rows=t.text("untidy_rows", "flag"),  # type: ignore[arg-type]  # checked by the file model
    )


def _inside(root: Path, relpath: str, where: str) -> Path:
    """The absolute path of a readings file, which must lie inside the project folder."""
    path = (root / relpath).resolve()
    if not path.is_relative_to(root):
        raise ProjectFileError(
            f"{where}: readings path {relpath!r} points outside the project folder {root}. Copy the file into the "
            "project folder (`shearbook import` does this) and give its path relative to the folder."
        )
    return path


def _suffix_format(relpath: str) -> str:
    return "xlsx" if relpath.lower().endswith((".xlsx", ".xlsm")) else "text"


def _consolidation(root: Path, top: _Fields) -> ConsolidationSpec | None:
    relpath = top.table.get("consolidation_file")
    if relpath is None:
        return None
    relpath = top.text("consolidation_file")
    where = f"{top.where} consolidation"
    return ConsolidationSpec(
        file=_inside(root, relpath, f"{top.where}: consolidation_file"),
        relpath=relpath,
        columns=_columns(_Fields(top.table_of("consolidation_columns"), f"{where}_columns"), relpath,
                         consolidation=True),
        csv=_csv(_Fields(top.table_of("consolidation_csv"), f"{where}_csv"), _suffix_format(relpath)),
    )


def _stage(root: Path, raw: Mapping[str, Any], defaults: Mapping[str, Any], index: int) -> StageSpec:
    merged = _merge(defaults, raw)
    top = _Fields(merged, f"{root / PROJECT_FILE}: stage {index + 1}")
    stage_id = top.text("id")
    top.where = f"{root / PROJECT_FILE}: stage {stage_id!r}"
    relpath = top.text("file")
    specimen = _specimen(_Fields(top.table_of("specimen"), f"{top.where} specimen"))
    return StageSpec(
        id=stage_id,
        file=_inside(root, relpath, f"{top.where}: file"),
        relpath=relpath,
        specimen=specimen,
        normal_load=_normal_load(_Fields(top.table_of("normal_load"), f"{top.where} normal_load"), specimen),
        columns=_columns(_Fields(top.table_of("columns"), f"{top.where} columns"), relpath),
        csv=_csv(_Fields(top.table_of("csv"), f"{top.where} csv"), _suffix_format(relpath)),
        test_set=top.text("test_set", ""),
        stratum=top.text("stratum", ""),
        test_type=top.text("test_type", "single-stage"),
        description=top.text("description", ""),
        consolidation=_consolidation(root, top),
        sample=_sample(_Fields(top.table_of("sample"), f"{top.where} sample")),
    )


def load_project(folder: str | Path) -> Project:
    """Read and validate ``project.toml`` in ``folder``.

    Raises
    ------
    ProjectFileError
        With the file and field at fault when anything is missing or wrong.
    """
    root = Path(folder).resolve()
    path = root / PROJECT_FILE
    if not path.is_file():
        raise ProjectFileError(
            f"{path}: no project file here. Point Shearbook at a project folder holding {PROJECT_FILE}."
        )
    try:
        raw = tomllib.loads(path.read_bytes().decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise ProjectFileError(f"{path}: not UTF-8 text (byte {exc.start} is {exc.object[exc.start:exc.start + 1]!r});"
                               " save the project file as UTF-8 and try again.") from None
    except tomllib.TOMLDecodeError as exc:
        raise ProjectFileError(f"{path}: not valid TOML ({exc}). Fix the file and try again.") from None
    except RecursionError:
        raise ProjectFileError(f"{path}: nested too deeply to be a project file.") from None
    if raw.get("schema") != SCHEMA:
        raise ProjectFileError(f"{path}: schema must be {SCHEMA!r}, found {raw.get('schema')!r}.")
    from .file_models import check_project_table, listing

    problems = check_project_table(raw, str(path))
    if problems:
        raise ProjectFileError(f"{path}: {len(problems)} problem(s); fix them and try again:\n" + listing(problems))
    stages_raw = raw.get("stage", [])
    if not isinstance(stages_raw, list) or not stages_raw:
        raise ProjectFileError(f"{path}: no [[stage]] tables. Declare at least one stage.")
    defaults = raw.get("stage_defaults", {})
    stages = tuple(_stage(root, s, defaults, i) for i, s in enumerate(stages_raw))
    ids = [s.id for s in stages]
    dupes = sorted({i for i in ids if ids.count(i) > 1})
    if dupes:
        raise ProjectFileError(f"{path}: stage ids must be unique; repeated: {', '.join(dupes)}.")
    design = raw.get("design", {})
    rng = design.get("normal_stress_range_kpa")
    stress_range = (float(rng[0]), float(rng[1])) if rng else None
    units = str(raw.get("display", {}).get("units", "SI"))
    return Project(root=root, meta=raw.get("project", {}), stages=stages, design_stress_range_kpa=stress_range, raw=raw,
                   display_units=units)
