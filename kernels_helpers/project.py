"""The project file (``project.toml``): metadata, specimens, column maps and units.

A project is a folder a person can read: the project file, the raw readings files exactly as the
laboratory sent them, the interpretation file and the exported records. This module only reads
and validates the project file; it never touches the readings.
"""

from __future__ import annotations

import itertools
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
    "ApparatusSpec",
    "CalibrationSpec",
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
# time is optional: a hand-logged sheet read at intervals of displacement may have none (no rate check then)
REQUIRED_COLUMNS: Final = ("horizontal_displacement", "vertical_displacement")

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


DIVISIONS: Final = ("div", "divisions")  # a dial gauge or proving-ring reading, converted by a calibration


@dataclass(frozen=True)
class CalibrationSpec:
    """A named calibration (``[calibration.NAME]``): divisions (or another input) to a physical value.

    ``kind`` "linear": value = offset + factor x input; "table": a monotonic table (certificate)
    interpolated by PCHIP; "polynomial": value = c0 + c1 x + c2 x^2 + ... The calibrated value is in
    ``output_unit``; ``range`` is the input span the calibration covers (a reading outside it is flagged).
    """

    name: str
    kind: Literal["linear", "table", "polynomial"]
    input_unit: str
    output_unit: str
    source: str
    date: str
    range: tuple[float, float]
    factor: float = 1.0
    offset: float = 0.0
    inputs: tuple[float, ...] = ()
    values: tuple[float, ...] = ()
    coefficients: tuple[float, ...] = ()

    def describe(self) -> str:
        what = {"linear": f"linear, {self.factor:g} {self.output_unit}/{self.input_unit}"
                          + (f" + {self.offset:g} {self.output_unit}" if self.offset else ""),
                "table": f"table of {len(self.inputs)} points, PCHIP (monotonic) between them",
                "polynomial": f"polynomial of degree {len(self.coefficients) - 1}"}[self.kind]
        return (f"{self.name}: {what}; {self.input_unit} -> {self.output_unit}, calibrated over "
                f"{self.range[0]:g}-{self.range[1]:g} {self.input_unit}; {self.source}, {self.date}")


@dataclass(frozen=True)
class ApparatusSpec:
    """Apparatus corrections of a stage (``[stage.apparatus]``); every one is stated in the results."""

    horizontal_measured_at: Literal["box", "drive"] = "box"  # "drive": the ring's own deflection is taken out
    ring_dial_mm_per_div: float | None = None  # proving ring: its dial's mm per division (its deflection)
    lid_mass_g: float = 0.0  # lid, loading pad and hanger: their weight is added to the normal load
    box_friction: CalibrationSpec | None = None  # empty-box run: friction force (N) against displacement (mm)
    vertical_compliance: CalibrationSpec | None = None  # steel dummy: apparatus deflection (mm) against load (N)
    flag_share: float = 0.05  # a correction larger than this share of the value it corrects is flagged


@dataclass(frozen=True)
class ColumnSpec:
    """How one canonical quantity is read from a readings file."""

    quantity: str
    column: str
    unit: str
    factor: float  # multiply the file's values by this to get canonical units
    dilation_positive: bool = True  # vertical gauge only: False when it reads down on dilation
    zero: float = 0.0  # zero offset in the file's unit: canonical = (reading - zero) x factor
    calibration: CalibrationSpec | None = None  # unit "div": (reading - zero) -> calibration -> x factor


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
    apparatus: ApparatusSpec | None = None  # [stage.apparatus]: corrections for the apparatus


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
    calibrations: Mapping[str, CalibrationSpec] = field(default_factory=dict)  # [calibration.NAME]
    manual_pick_reason: str = "prompt"  # [policy]: "require" refuses a manual pick without a reason
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
    shape: Shape
    given = t.text("shape")
    if given == "square":
        shape, width = "square", t.number("side_mm")
    elif given == "circular":
        shape, width = "circular", t.number("diameter_mm")
    else:
        raise ProjectFileError(f"{t.where}: shape must be \"square\" or \"circular\", not {given!r}.")
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


def _columns(t: _Fields, file_label: str, consolidation: bool = False,
             calibrations: Mapping[str, CalibrationSpec] | None = None) -> dict[str, ColumnSpec]:
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
        cal = _column_calibration(f, where, unit, calibrations or {})
        try:
            factor = to_canonical_factor(cal.output_unit if cal else unit, quantity, f"{where} ({file_label})")
        except UnitError as exc:  # load_project raises ProjectFileError for anything wrong in the file
            raise ProjectFileError(str(exc)) from exc
        cols[quantity] = ColumnSpec(
            quantity=quantity,
            column=f.text("column"),
            unit=unit,
            factor=factor,
            dilation_positive=sense == "positive",
            zero=f.number("zero", positive=False, default=0.0),
            calibration=cal,
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


def _column_calibration(f: _Fields, where: str, unit: str,
                        calibrations: Mapping[str, CalibrationSpec]) -> CalibrationSpec | None:
    """The calibration of a column read in divisions; an error when one is missing or does not fit."""
    name = f.table.get("calibration")
    if unit.strip().lower() not in DIVISIONS:
        if name is not None:
            raise ProjectFileError(f"{where}: a calibration converts readings in divisions; give unit = \"div\" "
                                   f"with calibration = {name!r}, or remove the calibration.")
        return None
    if name is None:
        raise ProjectFileError(f"{where}: a column in divisions needs its calibration: add calibration = \"NAME\" "
                               "and a [calibration.NAME] table (linear factor, certificate table or polynomial).")
    return _named_calibration(str(name), where, calibrations, input_unit="div")


def _named_calibration(name: str, where: str, calibrations: Mapping[str, CalibrationSpec],
                       input_unit: str, output_dimension: str | None = None) -> CalibrationSpec:
    if name not in calibrations:
        known = ", ".join(sorted(calibrations)) or "none"
        raise ProjectFileError(f"{where}: no [calibration.{name}] in the project file (calibrations given: {known}).")
    cal = calibrations[name]
    if cal.input_unit.strip().lower() != input_unit:
        raise ProjectFileError(f"{where}: calibration {name!r} takes {cal.input_unit!r}; this needs one that takes "
                               f"{input_unit!r}.")
    if output_dimension is not None:
        from .units import DIMENSION_OF

        got = DIMENSION_OF.get(cal.output_unit.strip().lower())
        if got != output_dimension:
            raise ProjectFileError(f"{where}: calibration {name!r} gives {cal.output_unit!r}; this needs a "
                                   f"{output_dimension} unit.")
    return cal


def _calibrations(raw: Mapping[str, Any], path: Path) -> dict[str, CalibrationSpec]:
    """Every ``[calibration.NAME]`` table (the file model has checked the types already)."""
    out: dict[str, CalibrationSpec] = {}
    for name, table in raw.get("calibration", {}).items():
        where = f"{path}: [calibration.{name}]"
        t = _Fields(table, where)
        kind = t.text("kind")
        common = {"name": name, "kind": kind, "input_unit": t.text("input_unit", "div"),
                  "output_unit": t.text("output_unit"), "source": t.text("source"), "date": t.text("date")}
        span = table.get("range")
        if kind == "linear":
            if "factor" not in table:
                raise ProjectFileError(f"{where}: a linear calibration needs factor (output per input unit).")
            if span is None:
                raise ProjectFileError(f"{where}: give range = [low, high], the inputs the calibration was made over.")
            spec = CalibrationSpec(**common, range=(float(span[0]), float(span[1])),
                                   factor=t.number("factor", positive=False),
                                   offset=t.number("offset", positive=False, default=0.0))
        elif kind == "table":
            xs, ys = [float(v) for v in table.get("inputs", [])], [float(v) for v in table.get("values", [])]
            if len(xs) < 2 or len(xs) != len(ys):
                raise ProjectFileError(f"{where}: a table needs inputs and values of the same length, 2 or more "
                                       f"(found {len(xs)} inputs and {len(ys)} values).")
            if any(b <= a for a, b in itertools.pairwise(xs)):
                raise ProjectFileError(f"{where}: inputs must increase strictly (a certificate table, low to high).")
            steps = [b - a for a, b in itertools.pairwise(ys)]
            if not (all(s >= 0 for s in steps) or all(s <= 0 for s in steps)):
                raise ProjectFileError(f"{where}: values must rise (or fall) throughout: a calibration that turns "
                                       "back cannot be inverted; check the certificate.")
            lo, hi = (float(span[0]), float(span[1])) if span is not None else (xs[0], xs[-1])
            if lo < xs[0] or hi > xs[-1]:
                raise ProjectFileError(f"{where}: range {lo:g}-{hi:g} goes beyond the table ({xs[0]:g}-{xs[-1]:g}).")
            spec = CalibrationSpec(**common, range=(lo, hi), inputs=tuple(xs), values=tuple(ys))
        elif kind == "polynomial":
            coeffs = [float(v) for v in table.get("coefficients", [])]
            if not coeffs:
                raise ProjectFileError(f"{where}: a polynomial needs coefficients = [c0, c1, ...].")
            if span is None:
                raise ProjectFileError(f"{where}: give range = [low, high], the inputs the calibration was made over.")
            spec = CalibrationSpec(**common, range=(float(span[0]), float(span[1])), coefficients=tuple(coeffs))
        else:  # the file model refuses any other kind
            raise ProjectFileError(f"{where}: kind must be \"linear\", \"table\" or \"polynomial\", not {kind!r}.")
        if not spec.range[0] < spec.range[1]:
            raise ProjectFileError(f"{where}: range must be [low, high] with low < high.")
        out[name] = spec
    return out


def _apparatus(t: _Fields, calibrations: Mapping[str, CalibrationSpec], columns: Mapping[str, ColumnSpec]
               ) -> ApparatusSpec | None:
    if not t.table:
        return None
    at = t.text("horizontal_measured_at", "box")
    ring = t.number("ring_dial_mm_per_div") if "ring_dial_mm_per_div" in t.table else None
    if at == "drive":
        force = columns.get("shear_force")
        if ring is None or force is None or force.calibration is None:
            raise ProjectFileError(f"{t.where}: horizontal_measured_at = \"drive\" takes the proving ring's own "
                                   "deflection out: it needs the shear force read in divisions of the ring's dial "
                                   "(unit = \"div\") and ring_dial_mm_per_div.")
    friction = t.table.get("box_friction")
    compliance = t.table.get("vertical_compliance")
    return ApparatusSpec(
        horizontal_measured_at=at,  # type: ignore[arg-type]  # checked by the file model
        ring_dial_mm_per_div=ring,
        lid_mass_g=t.number("lid_mass_g", positive=False, default=0.0),
        box_friction=_named_calibration(str(friction), f"{t.where}.box_friction", calibrations, "mm", "force")
        if friction is not None else None,
        vertical_compliance=_named_calibration(str(compliance), f"{t.where}.vertical_compliance", calibrations,
                                               "n", "length") if compliance is not None else None,
        flag_share=t.number("flag_share", default=0.05),
    )


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


def _stage(root: Path, raw: Mapping[str, Any], defaults: Mapping[str, Any], index: int,
           calibrations: Mapping[str, CalibrationSpec] | None = None) -> StageSpec:
    merged = _merge(defaults, raw)
    top = _Fields(merged, f"{root / PROJECT_FILE}: stage {index + 1}")
    stage_id = top.text("id")
    top.where = f"{root / PROJECT_FILE}: stage {stage_id!r}"
    relpath = top.text("file")
    specimen = _specimen(_Fields(top.table_of("specimen"), f"{top.where} specimen"))
    columns = _columns(_Fields(top.table_of("columns"), f"{top.where} columns"), relpath,
                       calibrations=calibrations or {})
    apparatus = _apparatus(_Fields(top.table_of("apparatus"), f"{top.where} apparatus"), calibrations or {}, columns)
    load = _normal_load(_Fields(top.table_of("normal_load"), f"{top.where} normal_load"), specimen)
    if apparatus is not None and apparatus.lid_mass_g:
        lid = apparatus.lid_mass_g / 1000.0 * G_N
        load = NormalLoad(load.force_n + lid, f"{load.given_as}, plus lid, pad and hanger {apparatus.lid_mass_g:g} g "
                                              f"x g_n = {lid:.2f} N")
    return StageSpec(
        id=stage_id,
        file=_inside(root, relpath, f"{top.where}: file"),
        relpath=relpath,
        specimen=specimen,
        normal_load=load,
        columns=columns,
        csv=_csv(_Fields(top.table_of("csv"), f"{top.where} csv"), _suffix_format(relpath)),
        test_set=top.text("test_set", ""),
        stratum=top.text("stratum", ""),
        test_type=top.text("test_type", "single-stage"),
        description=top.text("description", ""),
        consolidation=_consolidation(root, top),
        sample=_sample(_Fields(top.table_of("sample"), f"{top.where} sample")),
        apparatus=apparatus,
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
    calibrations = _calibrations(raw, path)
    stages = tuple(_stage(root, s, defaults, i, calibrations) for i, s in enumerate(stages_raw))
    ids = [s.id for s in stages]
    dupes = sorted({i for i in ids if ids.count(i) > 1})
    if dupes:
        raise ProjectFileError(f"{path}: stage ids must be unique; repeated: {', '.join(dupes)}.")
    design = raw.get("design", {})
    rng = design.get("normal_stress_range_kpa")
    stress_range = (float(rng[0]), float(rng[1])) if rng else None
    units = str(raw.get("display", {}).get("units", "SI"))
    return Project(root=root, meta=raw.get("project", {}), stages=stages, design_stress_range_kpa=stress_range, raw=raw,
                   display_units=units, calibrations=calibrations,
                   manual_pick_reason=str(raw.get("policy", {}).get("manual_pick_reason", "prompt")))
