"""One typed model per hand-edited file: project.toml and interpretation.json (pydantic v2).

The models are the one description of each file's shape: every key, its type, its allowed values
and ranges. They are enforced on every read (:func:`check_project_table`,
:func:`check_interpretation_text`), yield the JSON Schema files shipped in ``schemas/`` (editors
validate as you type; :func:`json_schemas`, a test keeps them current), and turn every problem of
a file into one sentence naming the file, the key path, the value and what is allowed, with the
nearest valid key for a misspelt one. All problems of a file are collected before reporting.

The interpretation file's model is made of the dataclasses the rest of the package uses
(:mod:`.interpretation`, :mod:`.settings`), validated strictly (``STRICT_FILE``): a number is a
number (never ``true``, never ``"3"``), NaN and Infinity are refused, unknown keys are errors.
Rules across fields (a manual pick needs a position, an exclusion needs a reason) stay in the
dataclasses' ``__post_init__`` and come back as errors of the same form.
"""

from __future__ import annotations

import dataclasses
import difflib
import json
import types
import typing
from collections.abc import Mapping, Sequence
from typing import Annotated, Any, Final, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, TypeAdapter, ValidationError, field_validator

from .decisions import (
    PICK_PLACE,
    SCHEMA_VERSION,
    DesignChoices,
    Pick,
    PickError,
    Settings,
    SignOff,
    StageDecision,
    pick_keys,
)
from .decisions import SCHEMA as INTERPRETATION_SCHEMA
from .settings import FILE_KEYS, file_key

__all__ = ["Problem", "ResultsBlock", "check_interpretation_data", "check_interpretation_text", "check_project_table",
           "check_results_data", "json_schemas", "listing"]

PROJECT_SCHEMA: Final = "shearbook.project/1"
SHA256_PATTERN: Final = r"^[0-9a-f]{64}$"

Positive = Annotated[float, Field(gt=0)]
NonNegative = Annotated[float, Field(ge=0)]
Text = Annotated[str, Field(max_length=10_000)]


class _Table(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True, allow_inf_nan=False, frozen=True)


class ColumnEntry(_Table):
    """Where one quantity is read: the column header, its unit, and for the vertical gauge its sense."""

    column: Text = Field(min_length=1)
    unit: Text = Field(min_length=1)
    dilation: Literal["positive", "negative"] | None = None
    zero: float = 0.0
    calibration: Text | None = None  # unit "div": the [calibration.NAME] that converts the divisions


class ColumnMap(_Table):
    """The column map of a readings file: one entry per quantity the file holds (units.QUANTITY_OF)."""

    time: ColumnEntry | None = None
    horizontal_displacement: ColumnEntry | None = None
    vertical_displacement: ColumnEntry | None = None
    shear_force: ColumnEntry | None = None
    normal_force: ColumnEntry | None = None
    shear_stress: ColumnEntry | None = None
    normal_stress: ColumnEntry | None = None


class ConsolidationColumnMap(_Table):
    """The column map of a consolidation (time-settlement) file."""

    time: ColumnEntry | None = None
    vertical_displacement: ColumnEntry | None = None


class CsvLayout(_Table):
    """Text layout of a readings file (or the sheet of a workbook)."""

    delimiter: Annotated[str, Field(min_length=1, max_length=1)] | None = None
    decimal: Literal[".", ","] | None = None
    header_row: Annotated[int, Field(ge=0, le=10_000)] | None = None
    encoding: Text | None = None
    format: Literal["text", "xlsx"] | None = None
    sheet: Text | None = None
    time_order: Literal["strict", "flag"] | None = None
    untidy_rows: Literal["flag", "refuse"] | None = None


class SpecimenEntry(_Table):
    """Specimen geometry and phase data (mm, g)."""

    shape: Literal["square", "circular"] | None = None
    side_mm: Positive | None = None
    diameter_mm: Positive | None = None
    height_mm: Positive | None = None
    dry_mass_g: Positive | None = None
    gs: float | None = None
    consolidation_settlement_mm: float | None = None
    max_particle_mm: Positive | None = None
    water_content_pct: Annotated[float, Field(ge=0, le=1000)] | None = None
    relative_density: float | None = None

    @field_validator("gs")
    @classmethod
    def _gs_of_a_soil(cls, value: float | None) -> float | None:
        if value is not None and not 2.0 <= value <= 3.5:  # soils: about 2.5-2.9; wide bounds (common practice)
            raise ValueError(f"G_s, the specific gravity of the soil particles, lies between 2.0 and 3.5 (quartz "
                             f"2.65), not {value!r}")
        return value

    @field_validator("relative_density")
    @classmethod
    def _id_is_a_fraction(cls, value: float | None) -> float | None:
        if value is not None and not 0.0 <= value <= 1.0:
            raise ValueError(f"relative_density is I_D as a fraction between 0 and 1 (e.g. 0.65), not {value!r}")
        return value


class NormalLoadEntry(_Table):
    """The normal load: exactly one of force, stress on the nominal area, or hanger mass (with lever ratio)."""

    force_n: Positive | None = None
    stress_kpa: Positive | None = None
    hanger_mass_kg: Positive | None = None
    lever_ratio: Positive | None = None


class ApparatusEntry(_Table):
    """``[stage.apparatus]``: corrections for the apparatus, each stated per stage in the results."""

    horizontal_measured_at: Literal["box", "drive"] | None = None
    ring_dial_mm_per_div: Positive | None = None
    lid_mass_g: NonNegative | None = None
    box_friction: Text | None = None  # a calibration: friction force against horizontal displacement (mm)
    vertical_compliance: Text | None = None  # a calibration: apparatus deflection against normal force (N)
    flag_share: Annotated[float, Field(gt=0, le=1)] | None = None


class CalibrationEntry(_Table):
    """``[calibration.NAME]``: a dial gauge's, proving ring's or apparatus calibration, with its source and date."""

    kind: Literal["linear", "table", "polynomial"]
    input_unit: Text = "div"
    output_unit: Text = Field(min_length=1)
    source: Text = Field(min_length=1)  # e.g. the calibration certificate's number
    date: Text = Field(min_length=1)
    range: Annotated[list[float], Field(min_length=2, max_length=2)] | None = None
    factor: float | None = None
    offset: float | None = None
    inputs: list[float] | None = None
    values: list[float] | None = None
    coefficients: list[float] | None = None


class SampleEntry(_Table):
    """Where the specimen came from (AGS4 export); depths in m below ground."""

    location_id: Text | None = None
    sample_top_m: NonNegative | None = None
    sample_ref: Text | None = None
    sample_type: Text | None = None
    sample_id: Text | None = None
    specimen_ref: Text | None = None
    specimen_depth_m: NonNegative | None = None
    description: Text | None = None
    condition: Literal["", "undisturbed", "remoulded"] | None = None


class StageTable(_Table):
    """A ``[[stage]]`` table, or ``[stage_defaults]`` (the keys every stage inherits unless it sets them)."""

    id: Annotated[str, Field(min_length=1, max_length=200)] | None = None
    file: Text | None = None
    consolidation_file: Text | None = None
    test_set: Text | None = None
    stratum: Text | None = None
    test_type: Literal["single-stage", "multi-stage", "reversal"] | None = None
    description: Text | None = None
    specimen: SpecimenEntry | None = None
    normal_load: NormalLoadEntry | None = None
    columns: ColumnMap | None = None
    csv: CsvLayout | None = None
    consolidation_columns: ConsolidationColumnMap | None = None
    apparatus: ApparatusEntry | None = None
    consolidation_csv: CsvLayout | None = None
    sample: SampleEntry | None = None

    @field_validator("id")
    @classmethod
    def _id_is_trimmed(cls, value: str | None) -> str | None:
        if value is not None and value != value.strip():
            raise ValueError(f"stage id {value!r} begins or ends with a space; write it as {value.strip()!r}")
        return value


class ProjectMeta(_Table):
    """``[project]``: who, where, what; shown in the record and the AGS4 export."""

    name: Text | None = None
    site: Text | None = None
    client: Text | None = None
    laboratory: Text | None = None
    reference: Text | None = None
    recipient: Text | None = None
    description: Text | None = None
    test_method: Text | None = None
    invented_data: bool | None = None


class DesignTable(_Table):
    """``[design]``: the range of normal stress the parameters are for (kPa), low then high."""

    normal_stress_range_kpa: Annotated[list[NonNegative], Field(min_length=2, max_length=2)] | None = None

    @field_validator("normal_stress_range_kpa")
    @classmethod
    def _low_then_high(cls, value: list[float] | None) -> list[float] | None:
        if value is not None and not value[0] < value[1]:
            raise ValueError(f"give the range low then high, two different values (e.g. [50.0, 250.0]), "
                             f"not {list(value)}")
        return value


class DisplayTable(_Table):
    """``[display]``: how numbers are shown; stored values stay SI (display_units.py)."""

    units: Literal["SI", "US"] = "SI"  # "US": US customary (psf, in, lbf); stored values stay SI


class PolicyTable(_Table):
    """``[policy]``: what the project asks of the people interpreting it."""

    manual_pick_reason: Literal["prompt", "require"] = "prompt"  # "require": a manual pick without a reason is refused


class ProjectFile(_Table):
    """The project file ``project.toml``."""

    schema_: Literal["shearbook.project/1"] = Field(alias="schema")
    project: ProjectMeta = ProjectMeta()
    design: DesignTable = DesignTable()
    display: DisplayTable = DisplayTable()
    policy: PolicyTable = PolicyTable()
    calibration: dict[str, CalibrationEntry] = {}
    stage_defaults: StageTable = StageTable()
    stage: Annotated[list[StageTable], Field(min_length=1)]


class InterpretationFile(_Table):
    """The interpretation file ``interpretation.json``."""

    schema_: Literal["shearbook.interpretation/1"] = Field(alias="schema")
    schema_version: Annotated[int, Field(ge=1, le=SCHEMA_VERSION)]
    revision: Annotated[int, Field(ge=0)] = 0
    settings: Settings = Field(default_factory=Settings)  # (a default object would be shown by field name)
    stages: dict[str, StageDecision] = {}
    raw_files: dict[str, Annotated[str, Field(pattern=SHA256_PATTERN)]] = {}
    signoff: SignOff = SignOff()
    design: DesignChoices = DesignChoices()


def _inside_the_project(name: str) -> str:
    parts = name.replace("\\", "/").split("/")
    if not name or name.startswith(("/", "\\")) or ":" in parts[0] or any(p in ("", ".", "..") for p in parts):
        raise ValueError(f"a raw file is named by its path inside the project folder (e.g. readings/S1.csv), "
                         f"not {name!r}: a record naming a file outside the project is not verified")
    return name


RawFileName = Annotated[str, AfterValidator(_inside_the_project)]


class RawFileEntry(_Table):
    """One raw file the results were computed from: its SHA-256 and size."""

    sha256: Annotated[str, Field(pattern=SHA256_PATTERN)]
    size_bytes: Annotated[int, Field(ge=0)]


class Provenance(BaseModel):
    """What the results were computed from and with; verify reads these keys (others are compared as numbers)."""

    model_config = ConfigDict(extra="allow", strict=True, allow_inf_nan=False, frozen=True)

    raw_files: dict[RawFileName, RawFileEntry]
    interpretation_sha256: Annotated[str, Field(pattern=SHA256_PATTERN)]
    versions: dict[str, str]
    python: str


class ResultsBlock(BaseModel):
    """The results JSON as a record embeds it (schema ``shearbook.results/1``), read back by verify.

    Only the parts verify acts on are typed (the schema, the provenance, the lists it walks); every value
    is then compared leaf by leaf against the re-run, so nothing else needs a type of its own here.
    """

    model_config = ConfigDict(extra="allow", strict=True, allow_inf_nan=False, frozen=True)

    schema_: Literal["shearbook.results/1"] = Field(alias="schema")
    provenance: Provenance
    stages: list[dict[str, Any]]
    envelopes: list[dict[str, Any]]


_PROJECT = TypeAdapter(ProjectFile)
_INTERPRETATION = TypeAdapter(InterpretationFile)
_RESULTS = TypeAdapter(ResultsBlock)


@dataclasses.dataclass(frozen=True)
class Problem:
    """One problem of a file: where (key path), what was found, and what is allowed."""

    file: str
    path: str
    message: str

    def __str__(self) -> str:
        return f"{self.file}: {self.path}: {self.message}" if self.path else f"{self.file}: {self.message}"


def _path(loc: Sequence[int | str]) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif part.replace("_", "").isalnum() and part.isascii():
            out += f".{part}" if out else part
        else:
            out += f"[{json.dumps(part, ensure_ascii=False)}]"
    return out


def _unwrap(tp: Any) -> Any:
    """The model inside Optional/Annotated."""
    while True:
        origin = typing.get_origin(tp)
        if origin is Annotated:
            tp = typing.get_args(tp)[0]
        elif origin in (typing.Union, types.UnionType):
            args = [a for a in typing.get_args(tp) if a is not type(None)]
            if len(args) != 1:
                return tp
            tp = args[0]
        else:
            return tp


def _field_types(tp: Any) -> dict[str, Any]:
    tp = _unwrap(tp)
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        return {f.alias or name: f.annotation for name, f in tp.model_fields.items()}
    if dataclasses.is_dataclass(tp):
        hints = typing.get_type_hints(tp, include_extras=True)
        return {file_key(f.name): hints[f.name] for f in dataclasses.fields(tp)}  # read under its file key
    if typing.is_typeddict(tp):
        return dict(typing.get_type_hints(tp, include_extras=True))
    return {}


def _type_at(root: Any, loc: Sequence[int | str]) -> Any:
    """The declared type at ``loc`` below ``root`` (None where the path leaves the model)."""
    tp = root
    for part in loc:
        tp = _unwrap(tp)
        origin = typing.get_origin(tp)
        if origin in (dict, Mapping):
            tp = typing.get_args(tp)[1]
        elif origin in (list, tuple) and isinstance(part, int):
            tp = typing.get_args(tp)[0]
        else:
            tp = _field_types(tp).get(str(part))
            if tp is None:
                return None
    return tp


def _allowed(error: Mapping[str, Any]) -> str:
    ctx = error.get("ctx") or {}
    kind = error["type"]
    if kind == "enum" and error.get("loc", ())[-1:] == ("cohesion",):
        return f"allowed: {ctx.get('expected')} ('zero' is the fit through the origin, c' = 0)"
    if kind in ("literal_error", "enum"):
        return f"allowed: {ctx.get('expected')}"
    if kind == "string_pattern_mismatch" and ctx.get("pattern") == SHA256_PATTERN:
        return "allowed: a SHA-256, 64 hexadecimal digits 0-9 and a-f (Shearbook writes it: do not edit it by hand)"
    if kind in ("greater_than", "greater_than_equal", "less_than", "less_than_equal"):
        sign = {"greater_than": ">", "greater_than_equal": ">=", "less_than": "<", "less_than_equal": "<="}[kind]
        limit = next(iter(v for k, v in ctx.items() if k in ("gt", "ge", "lt", "le")))
        return f"allowed: a number {sign} {limit}"
    return ""


def _known_keys(root: Any, loc: Sequence[int | str]) -> list[str]:
    """The keys allowed at ``loc``; for a pick, those of its kind (the peak's place is not a window's)."""
    holder = _unwrap(_type_at(root, loc))
    if holder is Pick and loc:
        for kind in PICK_PLACE:
            if loc[-1] == kind:
                return list(pick_keys(kind))
    return sorted(_field_types(holder))


def _each_pick_problem(errors: Sequence[Any]) -> list[Any]:
    """The errors with a stage's pick problems (one :class:`PickError`) split into one each, at its key."""
    out = []
    for error in errors:
        cause = (error.get("ctx") or {}).get("error")
        if not isinstance(cause, PickError):
            out.append(error)
            continue
        # a place key of another kind is named by its rule as unknown, with the keys of this kind (a "did you
        # mean" would offer the nearest spelling, when the key is right for another kind of pick)
        out.extend({**error, "msg": message, "loc": (*error["loc"], *key)} for key, message in cause.problems)
    return out


def _problems(exc: ValidationError, root: Any, file: str, prefix: Sequence[int | str] = ()) -> list[Problem]:
    out = []
    for error in _each_pick_problem(exc.errors(include_url=False)):
        loc = tuple(part for part in error["loc"] if not str(part).startswith("function-") and part != "[key]")
        where = _path((*prefix, *loc))
        kind, value = error["type"], error.get("input")
        if kind in ("extra_forbidden", "unexpected_keyword_argument"):
            known = _known_keys(root, loc[:-1])
            near = difflib.get_close_matches(str(loc[-1]), known, n=1, cutoff=0.6)
            hint = f"did you mean {near[0]}?" if near else f"known keys here: {', '.join(known)}"
            if str(loc[-1]) in FILE_KEYS and FILE_KEYS[str(loc[-1])] in known:  # the word in code, not the file's
                hint = f"the file spells it {FILE_KEYS[str(loc[-1])]} (schema 1)"
            out.append(Problem(file, where, f"unknown key {str(loc[-1])!r}; {hint}"))
            continue
        if kind == "missing":
            out.append(Problem(file, where, "this key is required; add it"))
            continue
        shown = json.dumps(value, ensure_ascii=False, default=str) if not isinstance(value, Mapping | list) else ""
        allowed = _allowed(error)
        if kind == "value_error":  # a rule of the file's own (a dataclass check): its sentence says it all
            text = error["msg"].removeprefix("Value error, ")
        elif allowed:
            text = f"found {shown or 'a ' + type(value).__name__}; {allowed}"
        else:
            text = f"{error['msg']} (found {shown or 'a ' + type(value).__name__})"
        out.append(Problem(file, where, text))
    return out


def listing(problems: Sequence[Problem]) -> str:
    """The problems of one file as indented lines, one per problem (the file is named once, above them)."""
    return "\n".join(f"  {p.path or '(file)'}: {p.message}" for p in problems)


def check_project_table(raw: Mapping[str, Any], file: str) -> list[Problem]:
    """Every problem of a parsed project file (TOML tables), in file order; empty when it is well formed.

    A stage is named by its id where it has one (``stage "BH03-D1".specimen.gs``), else by its place
    counted from 1 (``stage 2``), as a person counts the ``[[stage]]`` tables in the file.
    """
    try:
        _PROJECT.validate_python(raw)
    except ValidationError as exc:
        listed = raw.get("stage")
        stages: list[Any] = listed if isinstance(listed, list) else []
        names = {i: (f'stage {json.dumps(t["id"], ensure_ascii=False)}' if isinstance(t, Mapping)
                     and isinstance(t.get("id"), str) and t["id"].strip() else f"stage {i + 1}")
                 for i, t in enumerate(stages)}
        return [dataclasses.replace(p, path=_stage_named(p.path, names)) for p in _problems(exc, ProjectFile, file)]
    return []


def _stage_named(path: str, names: Mapping[int, str]) -> str:
    import re

    m = re.match(r"stage\[(\d+)\]", path)
    return names.get(int(m.group(1)), m.group(0)) + path[m.end():] if m else path


def check_interpretation_text(text: str, file: str) -> tuple[InterpretationFile | None, list[Problem]]:
    """The validated interpretation file, or None and every problem of it."""
    try:
        return _INTERPRETATION.validate_json(text), []
    except ValidationError as exc:
        return None, _problems(exc, InterpretationFile, file)


def check_interpretation_data(data: Any, file: str) -> tuple[InterpretationFile | None, list[Problem]]:
    """As :func:`check_interpretation_text`, for data already parsed (e.g. embedded in a record)."""
    try:
        text = json.dumps(data, allow_nan=False)
    except (TypeError, ValueError) as exc:
        return None, [Problem(file, "", f"holds a value JSON cannot carry ({exc}); NaN and Infinity are refused")]
    return check_interpretation_text(text, file)


def check_results_data(data: Any, where: str) -> tuple[ResultsBlock | None, list[Problem]]:
    """The results block of a record read back: validated, or None and every problem of it."""
    try:
        text = json.dumps(data, allow_nan=False)
    except (TypeError, ValueError) as exc:
        return None, [Problem(where, "", f"holds a value JSON cannot carry ({exc}); NaN and Infinity are refused")]
    try:
        return _RESULTS.validate_json(text), []
    except ValidationError as exc:
        return None, _problems(exc, ResultsBlock, where)


def json_schemas() -> dict[str, dict[str, Any]]:
    """The JSON Schema of each file, by the file name it is shipped under in ``schemas/``."""
    return {
        "project.schema.json": {**_PROJECT.json_schema(by_alias=True), "$id": PROJECT_SCHEMA,
                                "title": "Shearbook project file (project.toml)"},
        "interpretation.schema.json": {**_picks_by_kind(_INTERPRETATION.json_schema(by_alias=True)),
                                       "$id": INTERPRETATION_SCHEMA,
                                       "title": "Shearbook interpretation file (interpretation.json)"},
    }


def _picks_by_kind(schema: dict[str, Any]) -> dict[str, Any]:
    """The schema with one definition per kind of pick, holding that kind's keys only (as the reader checks)."""
    defs = dict(schema["$defs"])
    pick = defs.pop("Pick")
    stage = dict(defs["StageDecision"])
    properties = dict(stage["properties"])
    for kind in PICK_PLACE:
        name = "".join(word.title() for word in kind.split("_")) + "Pick"
        defs[name] = {**pick, "title": name,
                      "properties": {k: v for k, v in pick["properties"].items() if k in pick_keys(kind)}}
        properties[kind] = {"$ref": f"#/$defs/{name}"}
    defs["StageDecision"] = {**stage, "properties": properties}
    return {**schema, "$defs": defs}


def write_schemas(folder: str | None = None) -> list[str]:
    """Write the JSON Schema files into ``folder`` (default: the package's ``schemas/``); return their paths.

    Run ``python -m kernels_helpers.file_models`` after changing a model; a test fails while the
    shipped files differ from what the models give.
    """
    from pathlib import Path

    out = Path(folder) if folder else Path(__file__).with_name("schemas")
    out.mkdir(exist_ok=True)
    written = []
    for name, schema in json_schemas().items():
        path = out / name
        path.write_text(json.dumps(schema, indent=2, sort_keys=True, ensure_ascii=False) + "\n", encoding="utf-8")
        written.append(str(path))
    return written


if __name__ == "__main__":
    print("\n".join(write_schemas()))
