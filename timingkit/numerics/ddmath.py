"""Double-double arithmetic on numpy arrays.

A double-double number is a pair ``(hi, lo)`` of float64 arrays with
``|lo| <= ulp(hi)/2``; together they carry about 106 bits (32 decimal digits).
Written by hand because no well-kept numpy library offers vectorised
error-free transformations; the algorithms are the classic ones of Dekker
(1971) and Knuth (TAOCP vol. 2), as collected by Hida, Li & Bailey (2001).
Portable: plain IEEE float64 only, never an extended-precision float type.
"""

from __future__ import annotations

from decimal import Decimal
from fractions import Fraction

import numpy as np

_SPLITTER = 134217729.0  # 2**27 + 1, Dekker's splitting constant


def two_sum(a, b):
    """Exact sum: a + b == s + e exactly (Knuth)."""
    s = a + b
    bb = s - a
    e = (a - (s - bb)) + (b - bb)
    return s, e


def quick_two_sum(a, b):
    """Exact sum when |a| >= |b|."""
    s = a + b
    e = b - (s - a)
    return s, e


def _split(a):
    t = _SPLITTER * a
    hi = t - (t - a)
    return hi, a - hi


def two_prod(a, b):
    """Exact product: a * b == p + e exactly (Dekker; no FMA needed)."""
    p = a * b
    ahi, alo = _split(a)
    bhi, blo = _split(b)
    e = ((ahi * bhi - p) + ahi * blo + alo * bhi) + alo * blo
    return p, e


def dd_add(ahi, alo, bhi, blo):
    """(ahi, alo) + (bhi, blo), accurate to ~1e-32 relative."""
    s, e = two_sum(ahi, bhi)
    t, f = two_sum(alo, blo)
    e = e + t
    s, e = quick_two_sum(s, e)
    e = e + f
    return quick_two_sum(s, e)


def dd_add_d(ahi, alo, b):
    """Double-double plus double."""
    s, e = two_sum(ahi, b)
    e = e + alo
    return quick_two_sum(s, e)


def dd_neg(ahi, alo):
    return -ahi, -alo


def dd_sub(ahi, alo, bhi, blo):
    return dd_add(ahi, alo, -bhi, -blo)


def dd_mul(ahi, alo, bhi, blo):
    """Double-double times double-double."""
    p, e = two_prod(ahi, bhi)
    e = e + (ahi * blo + alo * bhi)
    return quick_two_sum(p, e)


def dd_mul_d(ahi, alo, b):
    """Double-double times double."""
    p, e = two_prod(ahi, b)
    e = e + alo * b
    return quick_two_sum(p, e)


def dd_div_d(ahi, alo, b):
    """Double-double divided by double."""
    q1 = ahi / b
    p, e = two_prod(q1, b)
    s, f = two_sum(ahi, -p)
    f = f - e + alo
    q2 = (s + f) / b
    return quick_two_sum(q1, q2)


def dd_horner(coeffs, xhi, xlo):
    """Evaluate sum_k coeffs[k] * x**k by Horner's rule in double-double.

    ``coeffs`` is a sequence of (hi, lo) pairs (scalars or arrays), lowest
    order first.
    """
    rhi, rlo = coeffs[-1]
    rhi = np.asarray(rhi, dtype=float) + 0.0 * xhi
    rlo = np.asarray(rlo, dtype=float) + 0.0 * xhi
    for chi, clo in reversed(coeffs[:-1]):
        rhi, rlo = dd_mul(rhi, rlo, xhi, xlo)
        rhi, rlo = dd_add(rhi, rlo, chi, clo)
    return rhi, rlo


def dd_from_fraction(value: Fraction) -> tuple[float, float]:
    """Nearest double-double to an exact rational."""
    hi = float(value)  # correctly rounded
    lo = float(value - Fraction(hi))
    return hi, lo


def dd_from_decimal(text: str | Decimal | int | float) -> tuple[float, float]:
    """Parse a decimal string exactly, never through a float first."""
    if isinstance(text, float):
        return float(text), 0.0
    return dd_from_fraction(Fraction(Decimal(str(text).strip())))


def dd_to_fraction(hi, lo) -> Fraction:
    """Exact rational value of a scalar double-double."""
    return Fraction(float(hi)) + Fraction(float(lo))


def dd_to_decimal_string(hi, lo, digits: int = 25) -> str:
    """Decimal text of a scalar double-double with ``digits`` significant
    digits: plain notation for 1e-4 <= |x| < 1e16, else scientific (1.5e-15)."""
    from decimal import localcontext

    with localcontext() as ctx:
        ctx.prec = digits
        value = dd_to_fraction(hi, lo)
        d = Decimal(value.numerator) / Decimal(value.denominator)
        if d == 0:
            return "0"
        d = d.normalize()
        if Decimal("1e-4") <= abs(d) < Decimal("1e16"):
            return format(d, "f")
        mantissa, _, exponent = format(d, "e").partition("e")
        return f"{mantissa}e{int(exponent)}"


def dd_frac_round(hi, lo):
    """Split a double-double into (nearest integer, remainder in [-0.5, 0.5])."""
    n = np.round(hi)
    rhi, rlo = dd_add_d(hi, lo, -n)
    # hi may already be an integer with lo carrying the fraction
    extra = np.round(rhi + rlo)
    n = n + extra
    rhi, rlo = dd_add_d(rhi, rlo, -extra)
    return n, rhi + rlo
