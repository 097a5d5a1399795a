"""Photon events: barycentring, folding, periodicity statistics, event TOAs, simulation.

- ``barycentre``: :func:`time_events`, the model's pulse phase and the barycentric
  time of every event (the TOA chain at grid nodes, interpolated, error measured).
"""

from timingkit import lazy_exports

EXPORTS = {
    "time_events": "barycentre", "event_clock": "barycentre", "EventTiming": "barycentre",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
