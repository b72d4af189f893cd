"""Conversion of readings to Shearbook's canonical units: mm, N, kPa, s (and g, degrees).

The table is deliberately small and explicit: each factor is an exact definition (the inch is
25.4 mm, the pound-force 4.4482216152605 N, the kilogram-force 9.80665 N), so a reviewer can check
every one of them by eye.
"""

from __future__ import annotations

from typing import Final

from .errors import UnitError

__all__ = ["CANONICAL", "DIMENSION_OF", "QUANTITY_OF", "to_canonical_factor"]

_LBF_N: Final = 4.4482216152605  # exact by definition of the pound-force (avoirdupois pound, g_n)
_KGF_N: Final = 9.80665  # exact by definition (standard gravity)
_IN_MM: Final = 25.4  # exact by definition

#: canonical unit of each physical dimension
CANONICAL: Final[dict[str, str]] = {
    "time": "s",
    "length": "mm",
    "force": "N",
    "stress": "kPa",
}

# unit spelling (lower case) -> (dimension, factor to the canonical unit)
_FACTORS: Final[dict[str, tuple[str, float]]] = {
    "s": ("time", 1.0),
    "sec": ("time", 1.0),
    "min": ("time", 60.0),
    "h": ("time", 3600.0),
    "hr": ("time", 3600.0),
    "mm": ("length", 1.0),
    "m": ("length", 1000.0),
    "cm": ("length", 10.0),
    "um": ("length", 1e-3),
    "µm": ("length", 1e-3),
    "μm": ("length", 1e-3),
    "in": ("length", _IN_MM),
    "n": ("force", 1.0),
    "kn": ("force", 1000.0),
    "lbf": ("force", _LBF_N),
    "kgf": ("force", _KGF_N),
    "kpa": ("stress", 1.0),
    "mpa": ("stress", 1000.0),
    "pa": ("stress", 1e-3),
    "psi": ("stress", _LBF_N / _IN_MM**2 * 1000.0),  # lbf/in2 -> N/mm2 = MPa -> kPa
    "psf": ("stress", _LBF_N / (12 * _IN_MM) ** 2 * 1000.0),
    "ksf": ("stress", _LBF_N / (12 * _IN_MM) ** 2 * 1e6),
    # further spellings met in laboratory headers (same exact definitions)
    "ms": ("time", 1e-3),
    "secs": ("time", 1.0),
    "seconds": ("time", 1.0),
    "mins": ("time", 60.0),
    "minutes": ("time", 60.0),
    "hrs": ("time", 3600.0),
    "hours": ("time", 3600.0),
    "inch": ("length", _IN_MM),
    "inches": ("length", _IN_MM),
    "kn/m2": ("stress", 1.0),
    "kn/m²": ("stress", 1.0),
    "n/mm2": ("stress", 1000.0),
    "n/mm²": ("stress", 1000.0),
    "bar": ("stress", 100.0),  # exact: 1 bar = 100 kPa
    "kgf/cm2": ("stress", _KGF_N / 100.0 * 1000.0),  # kgf per 100 mm2 -> N/mm2 -> kPa = 98.0665
    "kgf/cm²": ("stress", _KGF_N / 100.0 * 1000.0),
}

#: the dimension of every known unit spelling, for guessing a column's quantity from its header
DIMENSION_OF: Final[dict[str, str]] = {unit: dim for unit, (dim, _) in _FACTORS.items()}

#: the physical dimension each canonical quantity of a readings file must have
QUANTITY_OF: Final[dict[str, str]] = {
    "time": "time",
    "horizontal_displacement": "length",
    "vertical_displacement": "length",
    "shear_force": "force",
    "normal_force": "force",
    "shear_stress": "stress",
    "normal_stress": "stress",
}


def to_canonical_factor(unit: str, quantity: str, where: str) -> float:
    """Return the factor that converts ``unit`` to the canonical unit of ``quantity``.

    Parameters
    ----------
    unit
        Unit as written in the project file (case-insensitive), e.g. ``"kN"``, ``"min"``.
    quantity
        Canonical quantity name, a key of :data:`QUANTITY_OF`.
    where
        Where the unit was found, for the error message (file and field).
    """
    entry = _FACTORS.get(unit.strip().lower())
    if entry is None:
        known = ", ".join(sorted({u for u in _FACTORS if u.isascii()}))
        raise UnitError(f"{where}: unknown unit {unit!r}. Use one of: {known}.")
    dimension, factor = entry
    expected = QUANTITY_OF[quantity]
    if dimension != expected:
        raise UnitError(
            f"{where}: unit {unit!r} is a {dimension} unit but {quantity} needs a {expected} unit "
            f"(canonical {CANONICAL[expected]})."
        )
    return factor
