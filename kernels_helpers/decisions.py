"""The decisions of an interpretation, as records: every choice the engineer made, and the settings.

Plain frozen dataclasses and their canonical JSON text (sorted keys, two-space indentation, so two
versions diff cleanly in version control). Reading a file into them is :mod:`.interpretation`
(validated by :mod:`.file_models`); writing one is :mod:`.revisions`. This module reads and writes
no file, so the file models can be built from it.
"""

from __future__ import annotations

import dataclasses
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

from .settings import PARTIAL_FACTOR_SETS, STRICT_FILE, PickSettings, RateSettings, ReductionSettings
from .signatures import Digests, StepSignature

__all__ = [
    "INTERPRETATION_FILE",
    "SCHEMA",
    "SCHEMA_VERSION",
    "DesignChoices",
    "DesignKind",
    "FitSettings",
    "Interpretation",
    "PeakChoice",
    "PickKind",
    "ResidualChoice",
    "Settings",
    "SignOff",
    "SignOffState",
    "SignOffStep",
    "Source",
    "StageDecision",
    "WindowChoice",
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


@dataclass(frozen=True)
class FitSettings:
    """Envelope options: which c' the reported parameters use, the confidence level, the outlier test.

    ``outlier_level``: a stage is flagged as an outlier when its strength lies outside this
    prediction interval of the envelope fitted without it (the same as its externally studentised
    residual beyond Student's t at (1 + level)/2 with n - p - 1 degrees of freedom). Never excluded
    automatically: the engineer decides.
    """

    __pydantic_config__ = STRICT_FILE

    cohesion: Literal["free", "zero"] = "free"
    level: float = 0.95
    outlier_level: float = 0.95

    def __post_init__(self) -> None:
        if self.cohesion not in ("free", "zero"):
            raise ValueError(f"cohesion must be 'free' or 'zero', not {self.cohesion!r}")
        if not 0.5 < self.level < 1:
            raise ValueError(f"level must be between 0.5 and 1, not {self.level!r}")
        if not 0.5 < self.outlier_level < 1:
            raise ValueError(f"outlier_level must be between 0.5 and 1, not {self.outlier_level!r}")


@dataclass(frozen=True)
class Settings:
    """All settings that change numbers or checks: reduction, suggestion rules, fits, drained rate."""

    __pydantic_config__ = STRICT_FILE

    reduction: ReductionSettings = field(default_factory=ReductionSettings)
    picks: PickSettings = field(default_factory=PickSettings)
    fit: FitSettings = field(default_factory=FitSettings)
    rate: RateSettings = field(default_factory=RateSettings)


def _window_in_order(x_from_mm: float | None, x_to_mm: float | None, what: str) -> None:
    # a window of one value passes here and is refused where the readings are known ("needs at least 5 readings")
    if x_from_mm is not None and x_to_mm is not None and x_from_mm > x_to_mm:
        raise ValueError(f"a {what} runs from the smaller to the larger displacement: x_from_mm {x_from_mm!r} is "
                         f"more than x_to_mm {x_to_mm!r}; swap them")


@dataclass(frozen=True)
class PeakChoice:
    """The peak pick of a stage: the suggestion, or a manual displacement (mm) with who, when, why."""

    __pydantic_config__ = STRICT_FILE

    source: Source = "suggested"
    x_mm: float | None = None
    author: str = ""
    time_utc: str = ""
    note: str = ""

    def __post_init__(self) -> None:
        if self.source == "manual" and self.x_mm is None:
            raise ValueError("a manual peak pick needs x_mm")


@dataclass(frozen=True)
class WindowChoice:
    """The critical-state pick: the suggested window, or a manual one (mm) with who, when, why."""

    __pydantic_config__ = STRICT_FILE

    source: Source = "suggested"
    x_from_mm: float | None = None
    x_to_mm: float | None = None
    author: str = ""
    time_utc: str = ""
    note: str = ""

    def __post_init__(self) -> None:
        if self.source == "manual" and (self.x_from_mm is None or self.x_to_mm is None):
            raise ValueError("a manual critical-state window needs x_from_mm and x_to_mm")
        _window_in_order(self.x_from_mm, self.x_to_mm, "critical-state window")


@dataclass(frozen=True)
class ResidualChoice:
    """The residual pick of a reversal test: the rule's suggestion, or a manual window on one pass (mm)."""

    __pydantic_config__ = STRICT_FILE

    source: Source = "suggested"
    pass_no: int | None = None
    x_from_mm: float | None = None
    x_to_mm: float | None = None
    author: str = ""
    time_utc: str = ""
    note: str = ""

    def __post_init__(self) -> None:
        if self.source == "manual" and (self.pass_no is None or self.x_from_mm is None or self.x_to_mm is None):
            raise ValueError("a manual residual pick needs pass_no, x_from_mm and x_to_mm")
        if self.pass_no is not None and self.pass_no < 1:
            raise ValueError(f"pass_no counts forward passes from 1, not {self.pass_no!r}")
        _window_in_order(self.x_from_mm, self.x_to_mm, "residual window")


@dataclass(frozen=True)
class StageDecision:
    """Inclusion of a stage (a reason is required to exclude it), its picks and a free note."""

    __pydantic_config__ = STRICT_FILE

    included: bool = True
    exclusion_reason: str = ""
    note: str = ""
    peak: PeakChoice = field(default_factory=PeakChoice)
    critical_state: WindowChoice = field(default_factory=WindowChoice)
    residual: ResidualChoice = field(default_factory=ResidualChoice)
    author: str = ""  # who last changed the inclusion or the note
    time_utc: str = ""
    # a critical state flagged "not reached" is left out of the critical-state envelope and line unless put
    # back in, with a reason (and who and when: author, time_utc)
    critical_state_used: bool = False
    critical_state_reason: str = ""

    def __post_init__(self) -> None:
        if not self.included and not self.exclusion_reason.strip():
            raise ValueError("a stage can only be excluded with a stated reason")
        if self.critical_state_used and not self.critical_state_reason.strip():
            raise ValueError("a critical state that was not reached can only be put back in the fit with a stated "
                             "reason")


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
        return self._edit(stage_id, peak=PeakChoice("manual", float(x_mm), author, utc_now(), note))

    def with_critical_state(self, stage_id: str, x_from_mm: float, x_to_mm: float, author: str,
                            note: str = "") -> Interpretation:
        """A manual critical-state window from ``x_from_mm`` to ``x_to_mm``."""
        lo, hi = sorted((float(x_from_mm), float(x_to_mm)))
        return self._edit(stage_id, critical_state=WindowChoice("manual", lo, hi, author, utc_now(), note))

    def with_residual(self, stage_id: str, pass_no: int, x_from_mm: float, x_to_mm: float, author: str,
                      note: str = "") -> Interpretation:
        """A manual residual pick: the mean |tau| over ``x_from_mm``-``x_to_mm`` on forward pass ``pass_no``."""
        lo, hi = sorted((float(x_from_mm), float(x_to_mm)))
        return self._edit(stage_id, residual=ResidualChoice("manual", int(pass_no), lo, hi, author, utc_now(), note))

    def back_to_suggestion(self, stage_id: str, pick: PickKind) -> Interpretation:
        fresh = {"peak": PeakChoice, "critical_state": WindowChoice, "residual": ResidualChoice}[pick]()
        return self._edit(stage_id, **{pick: fresh})

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
            "settings": dataclasses.asdict(self.settings),
            "stages": {k: dataclasses.asdict(v) for k, v in sorted(self.stages.items())},
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
