"""Arithmetic every stage builds on; imports nothing else of timingkit.

- ``ddmath``: double-double arithmetic (two-sum, two-product, Horner) for spin phase.
- ``timearray``: :class:`SplitTime`, the one two-part time (whole MJD day + fraction).
- ``grid_cubic``: four-point cubic interpolation on a uniform grid (stencil coefficients).
"""

from timingkit import lazy_exports

EXPORTS = {
    "SplitTime": "timearray",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
