"""Settings the interpretation file records: plain data with their own checks, no numerical stack.

Kept apart from the modules that use them (:mod:`.reduce`, :mod:`.picks`, :mod:`.design`, which
re-export them) so that reading and checking an interpretation file imports neither pandas nor
scipy: ``shearbook record`` checks the file before it starts the kernel.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final, Literal

__all__ = ["FILE_KEYS", "PARTIAL_FACTOR_SETS", "TIME_TO_FAILURE_RULES", "AreaConvention", "PickSettings",
           "RateSettings", "ReductionSettings", "file_key"]

AreaConvention = Literal["corrected", "nominal"]

#: The interpretation file's spelling (schema 1) of the settings whose word in code is "critical_state": the keys
#: keep the spelling they were first written with, because a signed sign-off digests the file's content
#: (signatures.py), so renaming a key in the file would make every earlier signature fail. A new schema version
#: may rename them, re-signing as it migrates. DEVELOPERS.md lists them.
FILE_KEYS: Final = {"critical_state_window_mm": "cs_window_mm", "critical_state_rate_tolerance": "cs_rate_tolerance",
                    "critical_state_trend_tolerance": "cs_trend_tolerance"}


def file_key(name: str) -> str:
    """The key in the interpretation file of the record field ``name`` (:data:`FILE_KEYS`, else the name itself)."""
    return FILE_KEYS.get(name, name)


#: how the file models (:mod:`.file_models`, pydantic) read these dataclasses from a file: unknown keys are
#: errors, a number is a number (never true or "3"), NaN and Infinity are refused, a field is read under its
#: file key. A plain dict, so that this module imports no validation library.
STRICT_FILE: Final = {"extra": "forbid", "strict": True, "allow_inf_nan": False, "alias_generator": file_key,
                      "serialize_by_alias": True}

# EN 1997-1 Annex A, Table A.4 (recommended values): set -> (gamma_phi' on tan phi', gamma_c')
PARTIAL_FACTOR_SETS: Final = {"M1": (1.0, 1.0), "M2": (1.25, 1.25)}


@dataclass(frozen=True)
class ReductionSettings:
    """Settings of the reduction, recorded in the interpretation file and the record.

    Attributes
    ----------
    area_convention
        ``"corrected"`` divides forces by the overlap area of the two halves of the box at the
        current displacement (default); ``"nominal"`` by the initial plan area.
    smoothing_window_mm
        Width of the Savitzky-Golay window (quadratic) used for the rate of dilation, in mm of
        horizontal displacement, on a curve resampled at a uniform step of window/25.
    peak_smoothing_mm
        Width of the light Savitzky-Golay smoothing of the shear stress used to locate picks.
    seating_fraction
        The start of shear is taken where the shear force first reaches this fraction of its
        maximum; the horizontal displacement before it is seating slack.
    """

    __pydantic_config__ = STRICT_FILE

    area_convention: AreaConvention = "corrected"
    smoothing_window_mm: float = 0.5
    seating_fraction: float = 0.02
    peak_smoothing_mm: float = 0.25

    def __post_init__(self) -> None:
        if self.area_convention not in ("corrected", "nominal"):
            raise ValueError(f"area_convention must be 'corrected' or 'nominal', not {self.area_convention!r}")
        if not self.smoothing_window_mm > 0:
            raise ValueError(f"smoothing_window_mm must be positive, not {self.smoothing_window_mm!r}")
        if not self.peak_smoothing_mm > 0:
            raise ValueError(f"peak_smoothing_mm must be positive, not {self.peak_smoothing_mm!r}")
        if not 0 < self.seating_fraction < 0.5:
            raise ValueError(f"seating_fraction must be between 0 and 0.5, not {self.seating_fraction!r}")


@dataclass(frozen=True)
class PickSettings:
    """Tolerances of the suggestion rules (see the module docstring)."""

    __pydantic_config__ = STRICT_FILE

    critical_state_window_mm: float = 2.0  # in the file: cs_window_mm (FILE_KEYS)
    critical_state_rate_tolerance: float = 0.01  # cs_rate_tolerance
    critical_state_trend_tolerance: float = 0.02  # cs_trend_tolerance
    distinct_peak_margin: float = 0.03
    peak_rule: Literal["tau", "ratio"] = "tau"  # maximum shear stress, or maximum stress ratio tau/sigma
    peak_dilation_offset_mm: float = 0.5  # flag when the peak is further than this from the maximum dilation rate
    stick_slip_fraction: float = 0.02  # flag when the readings scatter about the smoothed peak by more than this
    residual_tolerance: float = 0.03  # successive forward passes agree within this fraction
    # transducer faults over the shearing (checks.transducer_flags): a channel of at most this many values is stuck
    stuck_max_values: int = 2
    still_vertical_mm: float = 0.002  # a vertical gauge moving less than this over > 1 mm of travel does not move
    jump_robust_sd: float = 25.0  # a displacement step above this many robust s.d. of the steps ...
    jump_range_fraction: float = 0.05  # ... and this fraction of the channel's range, kept afterwards, is a jump

    def __post_init__(self) -> None:
        for name in ("critical_state_window_mm", "critical_state_rate_tolerance", "critical_state_trend_tolerance",
                     "distinct_peak_margin", "peak_dilation_offset_mm", "stick_slip_fraction", "residual_tolerance",
                     "stuck_max_values", "still_vertical_mm", "jump_robust_sd", "jump_range_fraction"):
            if not getattr(self, name) > 0:  # named by its file key: that is where a person types it
                raise ValueError(f"{file_key(name)} must be positive, not {getattr(self, name)!r}")
        if self.peak_rule not in ("tau", "ratio"):
            raise ValueError(f"peak_rule must be 'tau' or 'ratio', not {self.peak_rule!r}")


#: rule -> (multiplier, consolidation time it multiplies); REFERENCES sec. 1: ASTM D3080 50 t_50,
#: its root-time equivalent 11.6 t_90, BS 1377-7 12.7 t_100 (Gibson & Henkel 1954, 95 % drainage)
TIME_TO_FAILURE_RULES: Final = {"50 t_50": (50.0, "t_50"), "11.6 t_90": (11.6, "t_90"), "12.7 t_100": (12.7, "t_100")}


@dataclass(frozen=True)
class RateSettings:
    """How the drained-rate check takes the required time to failure from the consolidation stage.

    ``time_to_failure`` "largest" (the default) takes the largest of the rules the consolidation
    constructions give, the cautious choice; or one rule by name, the one the governing standard
    states: "50 t_50" (ASTM D3080, t_50 from log time), "11.6 t_90" (the same on root time) or
    "12.7 t_100" (BS 1377-7, t_100 from root time).
    """

    __pydantic_config__ = STRICT_FILE

    time_to_failure: str = "largest"

    def __post_init__(self) -> None:
        allowed = ("largest", *TIME_TO_FAILURE_RULES)
        if self.time_to_failure not in allowed:
            raise ValueError(f"time_to_failure must be one of {', '.join(map(repr, allowed))}, "
                             f"not {self.time_to_failure!r}")
