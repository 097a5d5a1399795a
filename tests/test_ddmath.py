"""Double-double arithmetic against exact rational arithmetic (Python fractions)."""

from fractions import Fraction

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from timingkit.numerics import ddmath

# Magnitudes of timing work (1e-60 .. 1e12, or zero): far from float64 underflow,
# where no error-free transformation can be exact.
finite = st.floats(min_value=-1e12, max_value=1e12, allow_nan=False,
                   allow_infinity=False).filter(lambda x: x == 0 or abs(x) > 1e-60)


def exact(hi, lo):
    return Fraction(float(hi)) + Fraction(float(lo))


def rel_err(value: Fraction, truth: Fraction) -> float:
    if truth == 0:
        return abs(float(value))
    return abs(float((value - truth) / truth))


@given(finite, finite)
def test_two_sum_and_two_prod_are_exact(a, b):
    s, e = ddmath.two_sum(np.float64(a), np.float64(b))
    assert exact(s, e) == Fraction(a) + Fraction(b)
    p, e = ddmath.two_prod(np.float64(a), np.float64(b))
    assert exact(p, e) == Fraction(a) * Fraction(b)


@settings(max_examples=300)
@given(finite, finite, finite, finite)
def test_dd_add_and_mul_agree_with_fractions(a, b, c, d):
    ahi, alo = ddmath.two_sum(np.float64(a), np.float64(b) * 1e-17)
    bhi, blo = ddmath.two_sum(np.float64(c), np.float64(d) * 1e-17)
    xa, xb = exact(ahi, alo), exact(bhi, blo)
    s = exact(*ddmath.dd_add(ahi, alo, bhi, blo))
    # addition: relative to the larger operand (cancellation is exact-ish)
    scale = max(abs(xa), abs(xb), Fraction(1, 10 ** 300))
    assert abs(float((s - (xa + xb)) / scale)) < 1e-30
    m = exact(*ddmath.dd_mul(ahi, alo, bhi, blo))
    assert rel_err(m, xa * xb) < 1e-30


def test_decimal_parsing_is_exact_to_dd_precision():
    text = "18.473162904173582641"
    hi, lo = ddmath.dd_from_decimal(text)
    assert rel_err(exact(hi, lo), Fraction(text)) < 1e-31
    assert ddmath.dd_to_decimal_string(hi, lo, 20) == "18.473162904173582641"


def test_frac_round_splits_integer_and_fraction():
    hi, lo = ddmath.two_sum(np.float64(1.0e12 + 3.0), np.float64(0.25))
    n, f = ddmath.dd_frac_round(hi, lo)
    assert n == 1.0e12 + 3.0 and f == 0.25
    n, f = ddmath.dd_frac_round(np.float64(7.75), np.float64(0.0))
    assert n == 8.0 and f == -0.25
