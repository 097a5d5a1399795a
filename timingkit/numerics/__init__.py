"""Arithmetic every stage builds on; imports nothing else of timingkit.

- ``ddmath``: double-double arithmetic (two-sum, two-product, Horner) for spin phase.
- ``timearray``: :class:`SplitTime`, the one two-part time (whole MJD day + fraction).
- ``grid_cubic``: four-point cubic interpolation on a uniform grid (stencil coefficients).
- ``chebyshev_grid``: smooth series evaluated on Chebyshev nodes only where there are times
  (:func:`evaluate_on_grid`, :class:`NodeCache`), and interval-by-interval Chebyshev sums.
"""

from timingkit import lazy_exports

EXPORTS = {
    "SplitTime": "timearray", "evaluate_on_grid": "chebyshev_grid",
    "NodeCache": "chebyshev_grid",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
