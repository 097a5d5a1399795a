"""The timing model and its sections (one per section of the model file).

- ``timing_model``: :class:`TimingModel`, built from a model document; evaluation of
  pulse phase at each TOA and the analytic design matrix.
- ``base``: :class:`ModelSection` (the interface) and :class:`Evaluation`.
- ``parameters``: :class:`Parameter` (value, uncertainty, free flag, exact high part).
- ``spin``, ``astrometry``, ``dispersion``, ``binary`` (+ ``binary_orbits``, ``kepler``),
  ``glitch``, ``group_offsets``, ``solar_wind``, ``noise``: the sections.
- ``flag_groups``: which TOAs a ``[[time_offset]]`` or ``[[white_noise]]`` group takes.
- ``correlations``: the ``[correlation]`` section; covariances from and to the uncertainties.
- ``conversion``: the model in another sky frame or binary form, covariance carried along.
- ``simulate``: TOAs that a model predicts exactly, plus noise.
"""

from timingkit.model.timing_model import OPTIONAL_SECTIONS, TimingModel  # noqa: F401
from timingkit.model import noise  # noqa: F401,E402  (registers [[white_noise]] and [red_noise])
