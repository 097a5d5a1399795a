"""The timing model and its components."""

from timingkit.model.timing_model import EXTRA_SECTIONS, TimingModel  # noqa: F401
