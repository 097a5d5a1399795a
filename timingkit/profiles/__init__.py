"""TOAs from folded pulse profiles, and simulated profiles for tests and demos.

- ``phase_gradient``: :func:`fit_shifts`, the Fourier-domain phase-gradient fit
  of profiles against a template (Taylor 1992), its uncertainties and the
  Cramér-Rao bound; Fourier rotation of profiles.
- ``templates``: von Mises components, the built-in invented template, and
  :func:`auto_template` (aligned, averaged, fitted with a few components).
- ``toas``: :func:`gather_profiles` and :func:`time_profiles` (profile files ->
  TOA table, per observation, channel or sub-integration).
- ``simulate``: :func:`simulate_profiles` (a true model folded with an imperfect
  predictor, radiometer noise at a chosen S/N).
"""

from timingkit import lazy_exports

EXPORTS = {
    "fit_shifts": "phase_gradient", "ShiftFit": "phase_gradient", "auto_template": "templates",
    "builtin_template": "templates", "gather_profiles": "toas", "time_profiles": "toas",
    "simulate_profiles": "simulate", "ProfileSimulation": "simulate",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
