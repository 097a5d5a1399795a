"""Quantities derived from a fitted model, with uncertainties and stated assumptions.

- ``spin``: period, period derivative, characteristic age, surface and light-cylinder fields,
  spin-down luminosity, braking index (Lorimer & Kramer 2005, ch. 3).
- ``binary``: mass function, companion masses, post-Keplerian GR predictions, kinematic terms.
- ``binary_report``: the binary and kinematic sections of report.json from a fitted model.
"""

from timingkit import lazy_exports

EXPORTS = {
    "derive_spin": "spin", "derive_binary": "binary_report", "derive_kinematic":
    "binary_report",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
