"""Photon events from X-ray and gamma-ray observers: barycentring, folding,
periodicity statistics, templates, event TOAs and simulated events.

- ``barycentre``: :func:`time_events`, the model's pulse phase and the barycentric time
  of every event (the TOA chain at grid nodes, interpolated, its error measured).
- ``periodicity``: Z^2_m, the H-test and their false-alarm probabilities, pulsed
  fraction (cross-fitted off-pulse window), peak phase, binned profiles.
- ``folding``: :func:`fold_summary`, the periodicity part of events_report.json.
- ``template``: :class:`PulseTemplate` (template file, Gaussian components, or ``auto``).
- ``photon_toas``: :func:`event_toas`, one TOA per chunk by unbinned maximum likelihood.
- ``simulate``: :func:`simulate_events` and an invented :func:`circular_orbit`.
"""

from timingkit import lazy_exports

EXPORTS = {
    "time_events": "barycentre", "event_clock": "barycentre", "EventTiming": "barycentre",
    "EventClock": "barycentre", "fold_summary": "folding", "PulseTemplate": "template",
    "event_toas": "photon_toas", "fit_shift": "photon_toas", "simulate_events": "simulate",
    "circular_orbit": "simulate", "fourier_sums": "periodicity", "h_test": "periodicity",
    "z2_values": "periodicity",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
