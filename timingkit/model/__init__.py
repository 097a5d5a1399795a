"""The timing model and its components."""

from timingkit.model.timing_model import EXTRA_SECTIONS, TimingModel  # noqa: F401
from timingkit.model import noise  # noqa: F401,E402  (registers [[white_noise]] and [red_noise])
