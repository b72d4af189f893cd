"""The decisions of an interpretation, as records: every choice the engineer made, and the settings.

Plain frozen dataclasses and their canonical JSON text (sorted keys, two-space indentation, so two
versions diff cleanly in version control). Reading a file into them is :mod:`.interpretation`
(validated by :mod:`.file_models`); writing one is :mod:`.revisions`. This module reads and writes
no file, so the file models can be built from it.
"""

from __future__ import annotations

import dataclasses
import enum
import hashlib
import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import (
    Any,
    Final,
    Literal,
    NotRequired,  # pydantic reads typing_extensions' TypedDict on Python 3.11
)

from typing_extensions import TypedDict

from .settings import PARTIAL_FACTOR_SETS, STRICT_FILE, PickSettings, RateSettings, ReductionSettings, file_key
from .signatures import Digests, StepSignature

__all__ = [
    "INTERPRETATION_FILE",
    "PICK_PLACE",
    "SCHEMA",
    "SCHEMA_VERSION",
    "Cohesion",
    "DesignChoices",
    "DesignKind",
    "FitSettings",
    "Interpretation",
    "Pick",
    "PickError",
    "PickKind",
    "Settings",
    "SignOff",
    "SignOffState",
    "SignOffStep",
    "Source",
    "StageDecision",
    "utc_now",
]

INTERPRETATION_FILE: Final = "interpretation.json"
SCHEMA: Final = "shearbook.interpretation/1"
SCHEMA_VERSION: Final = 1
Source = Literal["suggested", "manual"]  # where a pick comes from: the rule, or the engineer
PickKind = Literal["peak", "critical_state", "residual"]  # the strengths picked on a curve, one envelope each
DesignKind = Literal["peak", "critical_state"]  # the parameter sets a design may take
SignOffState = Literal["draft", "checked", "approved"]


class SignOffStep(TypedDict):
    """One step of the sign-off history (append-only); ``signature`` when it was signed (signatures.py)."""

    state: SignOffState
    who: str
    time_utc: str
    note: str
    signature: NotRequired[StepSignature]


# a TypedDict body takes no assignment: the strict file config (unknown keys are errors) is set on each afterwards
for _typed in (SignOffStep, StepSignature, Digests):
    setattr(_typed, "__pydantic_config__", STRICT_FILE)  # noqa: B010 (a TypedDict declares no such attribute)


def utc_now() -> str:
    """Current UTC time as ISO 8601 to the second, e.g. ``2026-12-01T10:00:00Z``."""
    return datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


class Cohesion(enum.StrEnum):
    """Which fit gives the reported c' and phi': c' free, or the line through the origin (c' = 0).

    The value is the files' spelling (interpretation and results, schema 1): the through-origin fit is written
    "zero" there, as it was first written, because a signed sign-off digests the files' content (as for
    :data:`~.settings.FILE_KEYS`). In code and on screen it is the origin.
    """

    FREE = "free"
    ORIGIN = "zero"


@dataclass(frozen=True)
class FitSettings:
    """Envelope options: which c' the reported parameters use, the confidence level, the outlier test.

    ``outlier_level``: a stage is flagged as an outlier when its strength lies outside this
    prediction interval of the envelope fitted without it (the same as its externally studentised
    residual beyond Student's t at (1 + level)/2 with n - p - 1 degrees of freedom). Never excluded
    automatically: the engineer decides.
    """

    __pydantic_config__ = STRICT_FILE

    cohesion: Cohesion = Cohesion.FREE
    level: float = 0.95
    outlier_level: float = 0.95

    def __post_init__(self) -> None:
        try:  # "free" and "zero" given as text (code, or an older caller) are the members they spell
            object.__setattr__(self, "cohesion", Cohesion(self.cohesion))
        except ValueError:
            raise ValueError(f"cohesion must be 'free' or 'zero' (the fit through the origin), not "
                             f"{self.cohesion!r}") from None
        if not 0.5 < self.level < 1:
            raise ValueError(f"level must be between 0.5 and 1, not {self.level!r}")
        if not 0.5 < self.outlier_level < 1:
            raise ValueError(f"outlier_level must be between 0.5 and 1, not {self.outlier_level!r}")

    @property
    def through_origin(self) -> bool:
        """Whether the reported c' and phi' are the line's through the origin (c' = 0)."""
        return self.cohesion == Cohesion.ORIGIN


@dataclass(frozen=True)
class Settings:
    """All settings that change numbers or checks: reduction, suggestion rules, fits, drained rate."""

    __pydantic_config__ = STRICT_FILE

    reduction: ReductionSettings = field(default_factory=ReductionSettings)
    picks: PickSettings = field(default_factory=PickSettings)
    fit: FitSettings = field(default_factory=FitSettings)
    rate: RateSettings = field(default_factory=RateSettings)

    def to_dict(self) -> dict[str, dict[str, Any]]:
        """The file's form: each section's fields under their file keys (:data:`~.settings.FILE_KEYS`)."""
        return {section.name: {file_key(k): v for k, v in dataclasses.asdict(getattr(self, section.name)).items()}
                for section in dataclasses.fields(self)}


# where each kind of pick lies on its curve: the peak at one displacement, the critical state over a window,
# the residual over a window on one forward pass of a reversal test. These are a pick's keys in the file.
PICK_PLACE: Final[Mapping[PickKind, tuple[str, ...]]] = {
    "peak": ("x_mm",),
    "critical_state": ("x_from_mm", "x_to_mm"),
    "residual": ("pass_no", "x_from_mm", "x_to_mm"),
}
_PICK_WORDS: Final[Mapping[PickKind, str]] = {"peak": "peak pick", "critical_state": "critical-state window",
                                              "residual": "residual pick"}


class PickError(ValueError):
    """Picks break rules of their kind: each problem with its key below the stage (``("peak",)``,
    ``("peak", "x_from_mm")``) and its sentence; the file's reader reports each one where it is."""

    def __init__(self, problems: tuple[tuple[tuple[str, ...], str], ...]) -> None:
        super().__init__("; ".join(message for _, message in problems))
        self.problems = problems


@dataclass(frozen=True)
class Pick:
    """One pick on a stage's curve (peak, critical state or residual): where, from which source, who, when, why.

    Where is the peak's displacement ``x_mm`` or a window ``x_from_mm``-``x_to_mm`` (mm), on forward pass
    ``pass_no`` for the residual of a reversal test; a pick of one kind leaves the others' places None
    (:data:`PICK_PLACE`, checked by :meth:`check`). ``source`` "suggested" takes the rule's pick and no place;
    "manual" is the engineer's, with ``author``, ``time_utc`` and the reason in ``note``.
    """

    __pydantic_config__ = STRICT_FILE

    source: Source = "suggested"
    x_mm: float | None = None
    x_from_mm: float | None = None
    x_to_mm: float | None = None
    pass_no: int | None = None
    author: str = ""
    time_utc: str = ""
    note: str = ""

    @classmethod
    def at(cls, x_mm: float, author: str, note: str = "") -> Pick:
        """A manual pick at one displacement (the peak), stamped now."""
        return cls("manual", x_mm=float(x_mm), author=author, time_utc=utc_now(), note=note)

    @classmethod
    def over(cls, x_from_mm: float, x_to_mm: float, author: str, note: str = "", pass_no: int | None = None) -> Pick:
        """A manual pick over a window, in either order (critical state; the residual on ``pass_no``), stamped now."""
        lo, hi = sorted((float(x_from_mm), float(x_to_mm)))
        return cls("manual", x_from_mm=lo, x_to_mm=hi, pass_no=None if pass_no is None else int(pass_no),
                   author=author, time_utc=utc_now(), note=note)

    def check(self, kind: PickKind) -> None:
        """Raise :class:`PickError` unless this is a well-formed pick of ``kind``."""
        place = PICK_PLACE[kind]
        for name in ("x_mm", "x_from_mm", "x_to_mm", "pass_no"):
            if name not in place and getattr(self, name) is not None:
                known = ", ".join(pick_keys(kind))
                raise PickError((((kind, name), f"unknown key {name!r}; known keys here: {known}"),))
        words = _PICK_WORDS[kind]
        if self.source == "manual" and any(getattr(self, name) is None for name in place):
            raise PickError((((kind,), f"a manual {words} needs {' and '.join(', '.join(place).rsplit(', ', 1))}"),))
        if self.pass_no is not None and self.pass_no < 1:
            raise PickError((((kind,), f"pass_no counts forward passes from 1, not {self.pass_no!r}"),))
        lo, hi = self.x_from_mm, self.x_to_mm
        # a window of one value passes here and is refused where the readings are known ("needs at least 5 readings")
        if lo is not None and hi is not None and lo > hi:
            what = "critical-state window" if kind == "critical_state" else "residual window"
            raise PickError((((kind,), f"a {what} runs from the smaller to the larger displacement: x_from_mm "
                                       f"{lo!r} is more than x_to_mm {hi!r}; swap them"),))

    def to_dict(self, kind: PickKind) -> dict[str, Any]:
        """The file's form of a pick of ``kind``: its own place keys only."""
        return {k: getattr(self, k) for k in pick_keys(kind)}


def pick_keys(kind: PickKind) -> tuple[str, ...]:
    """The keys of a pick of ``kind`` in the interpretation file, sorted."""
    return tuple(sorted(("source", "author", "time_utc", "note", *PICK_PLACE[kind])))


@dataclass(frozen=True)
class StageDecision:
    """Inclusion of a stage (a reason is required to exclude it), its picks and a free note."""

    __pydantic_config__ = STRICT_FILE

    included: bool = True
    exclusion_reason: str = ""
    note: str = ""
    peak: Pick = field(default_factory=Pick)
    critical_state: Pick = field(default_factory=Pick)
    residual: Pick = field(default_factory=Pick)
    author: str = ""  # who last changed the inclusion or the note
    time_utc: str = ""
    # a critical state flagged "not reached" is left out of the critical-state envelope and line unless put
    # back in, with a reason (and who and when: author, time_utc)
    critical_state_used: bool = False
    critical_state_reason: str = ""

    def __post_init__(self) -> None:
        problems: list[tuple[tuple[str, ...], str]] = []
        for kind in PICK_PLACE:
            try:
                self.pick(kind).check(kind)
            except PickError as exc:
                problems.extend(exc.problems)
        if problems:
            raise PickError(tuple(problems))
        if not self.included and not self.exclusion_reason.strip():
            raise ValueError("a stage can only be excluded with a stated reason")
        if self.critical_state_used and not self.critical_state_reason.strip():
            raise ValueError("a critical state that was not reached can only be put back in the fit with a stated "
                             "reason")

    def pick(self, kind: PickKind) -> Pick:
        """The pick of one kind."""
        pick: Pick = getattr(self, kind)
        return pick

    def to_dict(self) -> dict[str, Any]:
        """The file's form: each pick with its own place keys only."""
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name not in PICK_PLACE}
        return {**out, **{kind: self.pick(kind).to_dict(kind) for kind in PICK_PLACE}}


@dataclass(frozen=True)
class SignOff:
    """Sign-off state with its history: draft -> checked -> approved (who and when)."""

    __pydantic_config__ = STRICT_FILE

    state: SignOffState = "draft"
    history: tuple[SignOffStep, ...] = ()


@dataclass(frozen=True)
class DesignChoices:
    """The engineer's characteristic/design choices, with who, when and why (see ``design.py``).

    ``limit_state`` "large zone" takes the lower bound of the mean line, "local" the prediction
    bound (a 5 % fractile). ``parameter_set`` says whether peak or critical-state parameters suit
    the application (e.g. small anticipated strains vs large deformations); ``group`` is the
    envelope group ("" = the pooled stratum group when there is one, else the first group).
    ``expressed`` "tangent" gives c'_k and phi'_k, "secant" a line through the origin. Partial
    factors: ``gamma_phi`` on tan phi', ``gamma_c`` on c'; the names "M1" and "M2" carry the
    EN 1997-1 Table A.4 values, other values need a name of their own (e.g. the National Annex).
    ``v_known``: a coefficient of variation of tan phi' known from experience (EN 1990 D7.2).
    """

    __pydantic_config__ = STRICT_FILE

    limit_state: Literal["large zone", "local"] = "large zone"
    parameter_set: DesignKind = "critical_state"
    group: str = ""
    expressed: Literal["tangent", "secant"] = "tangent"
    partial_factors: str = "M2"
    gamma_phi: float = 1.25
    gamma_c: float = 1.25
    c_k_zero: bool = False
    c_k_zero_reason: str = ""
    v_known: float | None = None
    note: str = ""
    author: str = ""
    time_utc: str = ""

    def __post_init__(self) -> None:
        for name, allowed in (("limit_state", ("large zone", "local")), ("parameter_set", ("peak", "critical_state")),
                              ("expressed", ("tangent", "secant"))):
            if getattr(self, name) not in allowed:
                raise ValueError(f"{name} must be one of {', '.join(map(repr, allowed))}, not {getattr(self, name)!r}")
        if not (self.gamma_phi > 0 and self.gamma_c > 0):
            raise ValueError(
                f"partial factors must be positive, not gamma_phi {self.gamma_phi!r}, gamma_c {self.gamma_c!r}"
            )
        table = PARTIAL_FACTOR_SETS.get(self.partial_factors)
        if table is not None and table != (self.gamma_phi, self.gamma_c):
            raise ValueError(
                f"set {self.partial_factors} of EN 1997-1 Table A.4 is gamma_phi {table[0]}, gamma_c {table[1]}; "
                "to use other values give them a name of your own (e.g. the National Annex)"
            )
        if not self.partial_factors.strip():
            raise ValueError("the partial factor set needs a name (M1, M2 or your own, e.g. the National Annex)")
        if self.c_k_zero and not self.c_k_zero_reason.strip():
            raise ValueError("c'_k can only be set to zero with a stated reason")
        if self.v_known is not None and not 0 < self.v_known < 1:
            raise ValueError(f"v_known is a coefficient of variation between 0 and 1, not {self.v_known!r}")


@dataclass(frozen=True)
class Interpretation:
    """The engineer's decisions for a project; the single source of truth for the widgets."""

    stages: Mapping[str, StageDecision] = field(default_factory=dict)
    settings: Settings = field(default_factory=Settings)
    raw_files: Mapping[str, str] = field(default_factory=dict)  # relpath -> SHA-256 when last saved
    signoff: SignOff = field(default_factory=SignOff)
    schema: str = SCHEMA
    design: DesignChoices = field(default_factory=DesignChoices)
    revision: int = field(default=0, compare=False)  # the file revision this was read at (0: none); a save adds 1
    # the file as it was read (to_dict form): the base against which a save finds what this writer changed
    loaded: Mapping[str, Any] | None = field(default=None, compare=False, repr=False)

    def decision(self, stage_id: str) -> StageDecision:
        return self.stages.get(stage_id, StageDecision())

    def with_decision(self, stage_id: str, decision: StageDecision) -> Interpretation:
        return dataclasses.replace(self, stages={**self.stages, stage_id: decision})

    # --- edits an engineer makes (each returns a new Interpretation; the widgets call these) ---

    def _edit(self, stage_id: str, **changes: Any) -> Interpretation:
        return self.with_decision(stage_id, dataclasses.replace(self.decision(stage_id), **changes))

    def with_peak(self, stage_id: str, x_mm: float, author: str, note: str = "") -> Interpretation:
        """A manual peak at displacement ``x_mm`` (it snaps to the nearest reading)."""
        return self._edit(stage_id, peak=Pick.at(x_mm, author, note))

    def with_critical_state(self, stage_id: str, x_from_mm: float, x_to_mm: float, author: str,
                            note: str = "") -> Interpretation:
        """A manual critical-state window from ``x_from_mm`` to ``x_to_mm``."""
        return self._edit(stage_id, critical_state=Pick.over(x_from_mm, x_to_mm, author, note))

    def with_residual(self, stage_id: str, pass_no: int, x_from_mm: float, x_to_mm: float, author: str,
                      note: str = "") -> Interpretation:
        """A manual residual pick: the mean |tau| over ``x_from_mm``-``x_to_mm`` on forward pass ``pass_no``."""
        return self._edit(stage_id, residual=Pick.over(x_from_mm, x_to_mm, author, note, pass_no))

    def back_to_suggestion(self, stage_id: str, pick: PickKind) -> Interpretation:
        return self._edit(stage_id, **{pick: Pick()})

    def excluded(self, stage_id: str, reason: str, author: str) -> Interpretation:
        """Exclude a stage from the envelopes; a reason is required. It stays visible, greyed."""
        return self._edit(stage_id, included=False, exclusion_reason=reason, author=author, time_utc=utc_now())

    def restored(self, stage_id: str, author: str) -> Interpretation:
        return self._edit(stage_id, included=True, exclusion_reason="", author=author, time_utc=utc_now())

    def with_critical_state_used(self, stage_id: str, reason: str, author: str) -> Interpretation:
        """Put a stage's critical state back in the critical-state envelope and line although it was flagged
        as not reached (a reason is required); ``reason`` "" takes it out again (the default rule)."""
        return self._edit(stage_id, critical_state_used=bool(reason.strip()), critical_state_reason=reason,
                          author=author, time_utc=utc_now())

    def with_note(self, stage_id: str, note: str, author: str) -> Interpretation:
        return self._edit(stage_id, note=note, author=author, time_utc=utc_now())

    def with_raw_files(self, hashes: Mapping[str, str]) -> Interpretation:
        """Record the SHA-256 of every raw file the decisions were made against."""
        return dataclasses.replace(self, raw_files=dict(hashes))

    def with_signoff(self, state: Literal["draft", "checked", "approved"], who: str, note: str = "",
                     time_utc: str | None = None, signature: StepSignature | None = None) -> Interpretation:
        """Move the sign-off state: draft -> checked -> approved, or back to draft. Who and when are kept.

        ``time_utc`` and ``signature``: a signed step is signed over its time, so the caller gives both.
        """
        order = ("draft", "checked", "approved")
        if state not in order:
            raise ValueError(f"sign-off state must be one of {', '.join(order)}, not {state!r}")
        now = order.index(self.signoff.state)
        if state != "draft" and order.index(state) != now + 1:
            raise ValueError(
                f"sign-off goes draft -> checked -> approved; cannot go from {self.signoff.state} to {state}"
            )
        if not who.strip():
            raise ValueError("a sign-off needs the name of the person")
        event = SignOffStep(state=state, who=who, time_utc=time_utc or utc_now(), note=note)
        if signature is not None:
            event["signature"] = signature
        return dataclasses.replace(self, signoff=SignOff(state, (*self.signoff.history, event)))

    def with_design(self, author: str, **changes: Any) -> Interpretation:
        """Change the characteristic/design choices (fields of :class:`DesignChoices`), stamping who and when."""
        choices = dataclasses.replace(self.design, **changes, author=author, time_utc=utc_now())
        return dataclasses.replace(self, design=choices)

    def to_dict(self) -> dict[str, Any]:
        return {
            "schema": self.schema,
            "schema_version": SCHEMA_VERSION,
            "revision": self.revision,
            "settings": self.settings.to_dict(),
            "stages": {k: v.to_dict() for k, v in sorted(self.stages.items())},
            "raw_files": dict(sorted(self.raw_files.items())),
            "signoff": {"state": self.signoff.state, "history": [dict(h) for h in self.signoff.history]},
            "design": dataclasses.asdict(self.design),
        }

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=2, sort_keys=True, ensure_ascii=False) + "\n"

    @property
    def sha256(self) -> str:
        """SHA-256 of the canonical JSON text (what :func:`~kernels_helpers.revisions.save_interpretation` writes)."""
        return hashlib.sha256(self.to_json().encode("utf-8")).hexdigest()
