"""Phase predictors: Chebyshev segments of a timing model's pulse phase against
time at one site and observing frequency, for folding an observation.

- ``build``: :func:`build_predictor` (segment length and degree chosen for a
  requested accuracy, 1e-9 cycles by default), :func:`build_window_predictor`
  (observing windows only); ``flags=`` states the observation's flag values.
- ``predictor``: :class:`PhasePredictor` (``phase``, ``frequency_hz``,
  ``segment_table``) and :func:`read_predictor` for predictor files.
- ``segments``: where segments must end (UTC days, glitches, DM ranges, clock tables).
- ``time_offsets``: which ``[[time_offset]]`` groups an observation's flags take.
- ``model_phase``: :class:`PhaseContext` and the full model's phase at site
  times, evaluated exactly.

::

    from timingkit.predict import read_predictor
    p = read_predictor("predictor.json")
    cycles, fraction = p.phase(["60000.5", "60000.51"])   # UTC at the site
"""

from timingkit import lazy_exports

EXPORTS = {
    "read_predictor": "predictor", "PhasePredictor": "predictor", "build_predictor": "build",
    "build_window_predictor": "build",
    "PhaseContext": "model_phase", "model_phase_at": "model_phase",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
