"""Model parameters: a value (optionally double-double), unit, free flag,
uncertainty, addressed by a dotted name such as ``spin.frequency_hz``."""

from __future__ import annotations

from dataclasses import dataclass
from decimal import Decimal
from fractions import Fraction

from timingkit.numerics import ddmath


@dataclass
class Parameter:
    name: str
    value: float
    unit: str = ""
    free: bool = False
    uncertainty: float | None = None
    value_lo: float = 0.0          # low part when the value is double-double
    high_precision: bool = False   # write as an exact decimal string
    description: str = ""
    key: str = ""                  # key in the model-file section ("" = last part of name)
    index: int | None = None       # position in a list-valued key
    file_scale: float = 1.0        # uncertainty in file units = uncertainty * file_scale

    def __post_init__(self):
        if not self.key:
            parts = self.name.split(".")
            if parts[-1].isdigit():
                self.key, self.index = parts[-2], int(parts[-1])
            else:
                self.key = parts[-1]

    def add(self, delta: float) -> None:
        """Add a fitted correction, keeping double-double precision."""
        hi, lo = ddmath.dd_add_d(self.value, self.value_lo, float(delta))
        self.value, self.value_lo = float(hi), float(lo)

    def set_decimal(self, value: Decimal) -> None:
        hi, lo = ddmath.dd_from_fraction(Fraction(value))
        self.value, self.value_lo = float(hi), float(lo)

    @property
    def decimal(self) -> Decimal:
        """Exact decimal value (31 significant digits for double-double)."""
        if self.high_precision:
            return Decimal(ddmath.dd_to_decimal_string(self.value, self.value_lo, 31))
        return Decimal(repr(self.value))

    def text(self) -> str:
        if self.high_precision:
            return ddmath.dd_to_decimal_string(self.value, self.value_lo, 25)
        return repr(self.value)


def derivative_unit(unit: str, order: int, per: str = "s") -> str:
    """Unit of the ``order``-th time derivative: ``Hz/s``, ``Hz/s^2``, ..."""
    return f"{unit}/{per}" if order == 1 else f"{unit}/{per}^{order}"


def mjd_parts(value: Decimal) -> tuple[float, float]:
    """Exact split of a decimal MJD into (whole day, fraction as float64)."""
    day = int(value // 1)
    frac = float(Fraction(value) - day)
    return float(day), frac


def mjd_decimal(day: float, frac: float) -> Decimal:
    """Decimal of a two-part MJD (the pair's value to 20 places, no exponent)."""
    value = (Decimal(int(day)) + Decimal(frac)).quantize(Decimal("1e-20"))
    text = format(value, "f").rstrip("0").rstrip(".")
    return Decimal(text or "0")
