"""Critical-state line of the stages: void ratio at critical state against ln(sigma').

e_cs = e_1 - lambda ln(sigma' / 1 kPa), fitted by least squares (n - 2 dof) with dense and loose
specimens together: if they reach one line, the critical states are consistent. In the shear box
the normal stress on the shear plane stands in for the mean stress p' of the critical-state
framework, so lambda and e_1 here are those of the box, not of triaxial tests.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from .envelope import LineFit, fit_line

__all__ = ["CriticalStateLine", "fit_critical_state_line"]


@dataclass(frozen=True)
class CriticalStateLine:
    """e at critical state against ln(sigma'/1 kPa): slope -lambda, intercept e_1 at 1 kPa."""

    stage_ids: tuple[str, ...]
    test_sets: tuple[str, ...]
    sigma_kpa: tuple[float, ...]
    e_cs: tuple[float, ...]
    e_start: tuple[float, ...]  # void ratio at the start of shear, to show which way each specimen went
    fit: LineFit  # e against ln(sigma')
    group: str = ""

    @property
    def lambda_(self) -> float:
        return -self.fit.slope

    @property
    def e_1kpa(self) -> float:
        return self.fit.intercept

    def e_at(self, sigma_kpa: float) -> float:
        return self.fit.intercept + self.fit.slope * math.log(sigma_kpa)


def fit_critical_state_line(stage_ids: Sequence[str], test_sets: Sequence[str], sigma_kpa: Sequence[float],
                            e_cs: Sequence[float], e_start: Sequence[float], group: str = "") -> CriticalStateLine:
    """Least-squares line of e_cs on ln(sigma'); needs 3 stages at two or more stresses."""
    if any(s <= 0 for s in sigma_kpa):
        raise ValueError("the critical-state line needs positive normal stresses")
    fit = fit_line([math.log(s) for s in sigma_kpa], list(e_cs))
    return CriticalStateLine(tuple(stage_ids), tuple(test_sets), tuple(float(v) for v in sigma_kpa),
                             tuple(float(v) for v in e_cs), tuple(float(v) for v in e_start), fit, group)
