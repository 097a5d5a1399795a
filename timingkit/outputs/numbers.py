"""Numbers and units as people read them on the terminal.

A measured value is printed to the precision its uncertainty supports: the
uncertainty with two significant digits, the value rounded to the same
decimal place (decimal arithmetic, so high-precision values such as the spin
frequency are rounded from their exact text). Units are written as
physicists write them: ``Hz/s``, ``Hz/s²``, ``pc cm⁻³``, ``µs``.
Machine-readable outputs (report.json, fitted.toml) keep every digit.
"""

from __future__ import annotations

import math
import re
from decimal import ROUND_HALF_EVEN, Decimal

SIGNIFICANT_DIGITS = 2          # of the uncertainty
PLAIN_RANGE = (1e-4, 1e7)       # |value| printed without an exponent inside this range
DEFAULT_DIGITS = 6              # significant digits of a value without an uncertainty

_SUPERSCRIPT = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")
_POWER = re.compile(r"\^\{?(-?\d+)\}?")
_UNIT_WORDS = {"us": "µs", "1/yr": "yr⁻¹", "1/s": "s⁻¹", "M_sun": "M☉"}


def physics_unit(unit: str | None) -> str:
    """``Hz/s^1`` -> ``Hz/s``, ``Hz/s^2`` -> ``Hz/s²``, ``pc cm^-3`` -> ``pc cm⁻³``,
    ``us`` -> ``µs``."""
    if not unit:
        return ""
    unit = _UNIT_WORDS.get(unit, unit)
    unit = re.sub(r"\^\{?1\}?(?![0-9])", "", unit)
    return _POWER.sub(lambda m: m.group(1).translate(_SUPERSCRIPT), unit)


def _decimal(value) -> Decimal:
    if isinstance(value, Decimal):
        return value
    if isinstance(value, str):
        return Decimal(value.strip())
    return Decimal(repr(float(value)))


def _exponent(x: Decimal) -> int:
    """Power of ten of the leading digit of ``x`` (x != 0)."""
    return x.adjusted()


def _fixed(x: Decimal, place: int) -> str:
    q = x.quantize(Decimal(1).scaleb(place), rounding=ROUND_HALF_EVEN)
    text = format(q, "f")
    return "0" if q == 0 and place >= 0 else text


def _scientific(x: Decimal, place: int) -> str:
    """``x`` as mantissa e exponent, rounded at 10**place."""
    q = x.quantize(Decimal(1).scaleb(place), rounding=ROUND_HALF_EVEN)
    if q == 0:
        return "0"
    exp = _exponent(q)
    mantissa = q.scaleb(-exp)
    decimals = max(0, exp - place)
    return f"{format(mantissa.quantize(Decimal(1).scaleb(-decimals)), 'f')}e{exp:+03d}"


def _plain(x: Decimal) -> bool:
    return x == 0 or PLAIN_RANGE[0] <= abs(x) < PLAIN_RANGE[1]


def format_value(value, uncertainty=None) -> str:
    """``value ± uncertainty`` to the precision the uncertainty supports (two
    significant digits of it); without a usable uncertainty (None, zero, not
    finite) the value alone, to DEFAULT_DIGITS significant digits."""
    if value is None:
        return "—"
    if isinstance(value, float) and not math.isfinite(value):
        return repr(value)
    x = _decimal(value)
    if uncertainty is None or not math.isfinite(float(uncertainty)) or float(uncertainty) <= 0:
        if x == 0:
            return "0"
        place = _exponent(x) - (DEFAULT_DIGITS - 1)
        text = _fixed(x, place) if _plain(x) else _scientific(x, place)
        if _plain(x) and "." in text:
            text = text.rstrip("0").rstrip(".")
        return text
    s = _decimal(float(uncertainty))
    place = _exponent(s) - (SIGNIFICANT_DIGITS - 1)
    s_rounded = s.quantize(Decimal(1).scaleb(place), rounding=ROUND_HALF_EVEN)
    if _exponent(s_rounded) > _exponent(s):        # 9.96 -> 10: one digit fewer
        place += 1
        s_rounded = s.quantize(Decimal(1).scaleb(place), rounding=ROUND_HALF_EVEN)
    if not isinstance(value, (str, Decimal)) and x != 0:
        place = max(place, _exponent(x) - 16)      # a float holds 17 significant digits
    plain = _plain(x)
    value_text = _fixed(x, place) if plain else _scientific(x, place)
    sigma_text = (_fixed(s_rounded, place) if plain and _plain(s_rounded)
                  else _scientific(s_rounded, place))
    return f"{value_text} ± {sigma_text}"


def _places(sigma) -> int:
    """Decimals that show two significant digits of ``sigma`` (0 to 12)."""
    if sigma is None or not math.isfinite(sigma) or sigma <= 0:
        return 9
    return int(min(12, max(0, -(math.floor(math.log10(sigma)) - (SIGNIFICANT_DIGITS - 1)))))


def angle_text(name: str, degrees: float, uncertainty_mas: float | None) -> str:
    """A sky angle in sexagesimal, its seconds rounded to the uncertainty (given
    in mas of the angle), then ``± σ mas``: right ascension in hours, minutes
    and seconds of time; the others in degrees, arcminutes and arcseconds."""
    from astropy.coordinates import Angle
    mas = None if uncertainty_mas is None else float(uncertainty_mas)
    if name == "position.ra":
        seconds = None if mas is None else mas / 1000.0 / 15.0
        text = Angle(degrees, unit="deg").to_string(unit="hourangle", sep="hms",
                                                    precision=_places(seconds), pad=True)
    else:
        lon = name.endswith("longitude_deg")
        text = Angle(degrees % 360.0 if lon else degrees, unit="deg").to_string(
            unit="deg", sep="dms", precision=_places(None if mas is None else mas / 1000.0),
            pad=True, alwayssign=not lon)
    return f"{text} ± {format_value(mas, mas).split(' ± ')[1]} mas" if mas else text


def format_quantity(value, uncertainty=None, unit: str | None = None) -> str:
    """:func:`format_value` followed by the unit in physicists' notation."""
    text = format_value(value, uncertainty)
    unit_text = physics_unit(unit)
    return f"{text} {unit_text}" if unit_text and value is not None else text


__all__ = ["format_value", "format_quantity", "physics_unit"]
