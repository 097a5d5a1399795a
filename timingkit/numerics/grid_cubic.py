"""Four-point (cubic Lagrange) interpolation on a uniform grid, vectorised.

For values y(-1), y(0), y(1), y(2) at nodes -1, 0, 1, 2 (in units of the
grid step), the cubic through them is p(x) = c0 + c1 x + c2 x^2 + c3 x^3,
used on 0 <= x < 1 (the middle interval). Its error there is at most
(9/16) h^4 max|f''''| / 24 = 0.0234 h^4 max|f''''|, largest at x = 1/2
(the node polynomial (x+1) x (x-1) (x-2) peaks there; the remainder of
Lagrange interpolation, Abramowitz & Stegun, Handbook of Mathematical
Functions, section 25.2). Written by hand because the
callers need the coefficients of many independent short stencils, gathered
per point, which scipy's interpolators do not expose.
"""

from __future__ import annotations

import numpy as np

MIDPOINT_ERROR_FACTOR = 9.0 / 16.0 / 24.0     # |error| <= this * h^4 * max|f''''|


def four_point_coefficients(y_before, y0, y1, y2):
    """(c0, c1, c2, c3) of the cubic through (-1, y_before), (0, y0), (1, y1), (2, y2)."""
    c0 = np.asarray(y0, dtype=float)
    c1 = (-2.0 * y_before - 3.0 * y0 + 6.0 * y1 - y2) / 6.0
    c2 = (y_before - 2.0 * y0 + y1) / 2.0
    c3 = (-y_before + 3.0 * y0 - 3.0 * y1 + y2) / 6.0
    return c0, c1, c2, c3


def evaluate_cubic(coefficients, x):
    """p(x) by Horner's rule; ``coefficients`` = (c0, c1, c2, c3), broadcast with x."""
    c0, c1, c2, c3 = coefficients
    return c0 + x * (c1 + x * (c2 + x * c3))


def cubic_slope(coefficients, x):
    """dp/dx at x."""
    _, c1, c2, c3 = coefficients
    return c1 + x * (2.0 * c2 + 3.0 * x * c3)
