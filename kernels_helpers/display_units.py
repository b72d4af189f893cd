"""Display units: SI (kPa, mm, N) or US customary (psf, in, lbf), for what is shown, never for what is stored.

Every stored value (interpretation file, results JSON, AGS4) stays in Shearbook's canonical SI
units (mm, N, kPa, s); a :class:`Display` turns a canonical value into the number and unit a reader
of a report expects, and a typed display value back into canonical units. The factors are exact
definitions (the inch is 25.4 mm, the foot 0.3048 m, the pound-force 4.4482216152605 N), the same
as the readings' unit table (:mod:`.units`); the tests check them against NIST SP 811 Appendix B
and against pint.

US customary choices (common practice in US geotechnical reports): stresses and strengths (sigma',
tau, c') in psf, displacements and specimen sizes in inches, forces in lbf, c_v in ft^2/yr, rates in
in/min; masses stay in grams (laboratory balances read grams) and angles in degrees.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Final, Literal

__all__ = ["SI", "UNIT_SYSTEMS", "US", "Display", "Quantity", "display_for"]

UnitSystem = Literal["SI", "US"]
Quantity = Literal["stress", "length", "force", "mass", "cv", "rate", "time"]
UNIT_SYSTEMS: Final = ("SI", "US")

_IN_MM: Final = 25.4  # exact
_FT_M: Final = 0.3048  # exact
_LBF_N: Final = 4.4482216152605  # exact (avoirdupois pound x standard gravity)
PSF_KPA: Final = _LBF_N / (_FT_M**2) / 1000.0  # 1 lbf/ft2 in kPa = 0.0478802589803...

# quantity -> (SI symbol, SI decimals, US symbol, US decimals, US units per canonical unit)
_TABLE: Final[dict[str, tuple[str, int, str, int, float]]] = {
    "stress": ("kPa", 1, "psf", 0, 1.0 / PSF_KPA),
    "length": ("mm", 2, "in", 3, 1.0 / _IN_MM),
    "force": ("N", 1, "lbf", 2, 1.0 / _LBF_N),
    "mass": ("g", 1, "g", 1, 1.0),
    "cv": ("m2/yr", 2, "ft2/yr", 1, 1.0 / _FT_M**2),
    "rate": ("mm/min", 4, "in/min", 6, 1.0 / _IN_MM),
    "time": ("min", 1, "min", 1, 1.0),
}
# SI unit written in a text (a flag, a note made by Shearbook) -> its quantity
_IN_TEXT: Final[dict[str, str]] = {"kPa": "stress", "mm": "length", "N": "force", "m2/yr": "cv", "mm/min": "rate"}
_NUMBER_UNIT = re.compile(r"(?<![\w.])(-?\d+(?:\.\d+)?) (kPa|mm/min|mm|m2/yr|N)(?![\w/])")


@dataclass(frozen=True)
class Display:
    """How numbers are shown: ``system`` "SI" (the default) or "US" (US customary)."""

    system: UnitSystem = "SI"

    @property
    def is_si(self) -> bool:
        return self.system == "SI"

    @property
    def name(self) -> str:
        return "SI (kPa, mm, N)" if self.is_si else "US customary (psf, in, lbf)"

    def unit(self, quantity: Quantity) -> str:
        si, _, us, _, _ = _TABLE[quantity]
        return si if self.is_si else us

    def factor(self, quantity: Quantity) -> float:
        """Display units per canonical unit (1 in SI)."""
        return 1.0 if self.is_si else _TABLE[quantity][4]

    def digits(self, quantity: Quantity, si_digits: int | None = None) -> int:
        """Decimals for ``quantity``; ``si_digits`` overrides the SI default and shifts the US one alike."""
        _, d_si, _, d_us, _ = _TABLE[quantity]
        shift = 0 if si_digits is None else si_digits - d_si
        return max(0, (d_si if self.is_si else d_us) + shift)

    def value(self, quantity: Quantity, canonical: float) -> float:
        """A canonical value (mm, N, kPa, m2/yr, mm/min) in display units."""
        return canonical * self.factor(quantity)

    def canonical(self, quantity: Quantity, shown: float) -> float:
        """A value typed in display units, in canonical units."""
        return shown / self.factor(quantity)

    def fmt(self, quantity: Quantity, canonical: float | None, si_digits: int | None = None) -> str:
        """The number as shown, without unit; "-" for a missing value; never "-0"."""
        if canonical is None or canonical != canonical:
            return "&ndash;"
        text = f"{self.value(quantity, canonical):.{self.digits(quantity, si_digits)}f}"
        return text[1:] if text.startswith("-") and float(text) == 0 else text

    def with_unit(self, quantity: Quantity, canonical: float | None, si_digits: int | None = None) -> str:
        return f"{self.fmt(quantity, canonical, si_digits)} {self.unit(quantity)}"

    def text(self, quantity: Quantity, canonical: float | None, si_digits: int | None = None) -> str:
        """As :meth:`with_unit`, for plain text (the terminal): "n/a" for a missing value."""
        if canonical is None or canonical != canonical:
            return "n/a"
        return self.with_unit(quantity, canonical, si_digits)

    def label(self, text: str, quantity: Quantity) -> str:
        """An axis or column label with its unit: ``label("shear stress", "stress")`` -> "shear stress (psf)"."""
        return f"{text} ({self.unit(quantity)})"

    def annotate(self, text: str) -> str:
        """A text written by Shearbook in SI (a flag, a method note) with the US values added in brackets.

        In SI the text is returned as it is. In US customary every "number unit" of kPa, mm, N, m2/yr
        or mm/min gets its US value beside it: "tau 155.2 kPa [3241 psf]". The stored text is unchanged.
        """
        if self.is_si:
            return text

        def add(m: re.Match[str]) -> str:
            quantity: Quantity = _IN_TEXT[m.group(2)]  # type: ignore[assignment]
            decimals = len(m.group(1).split(".")[1]) if "." in m.group(1) else 0
            return f"{m.group(0)} [{self.fmt(quantity, float(m.group(1)), decimals)} {self.unit(quantity)}]"

        return _NUMBER_UNIT.sub(add, text)


SI: Final = Display("SI")
US: Final = Display("US")


def display_for(system: str | None, where: str = "display units") -> Display:
    """The :class:`Display` named ``system`` ("SI" or "US", any case); None gives SI."""
    if system is None:
        return SI
    key = system.strip().upper()
    if key not in UNIT_SYSTEMS:
        raise ValueError(f"{where}: {system!r} is not a unit system; use \"SI\" or \"US\" (US customary).")
    return SI if key == "SI" else US
