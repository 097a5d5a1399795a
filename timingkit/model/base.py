"""The section interface of the timing model.

A :class:`ModelSection` owns one section of the model file and its
parameters, and says what it contributes (``contribution``): the light's
path across the sky and the Solar System ("sky_path"), propagation delays
such as dispersion ("propagation"), the binary orbit ("orbit"), pulse phase
from the star's rotation ("rotation"), or noise parameters only ("noise").
Time-shifting sections give the partial derivatives of the emission time
(seconds); rotation sections add pulse phase (cycles) at the emission time
and give phase partials. The :class:`Evaluation` carries the intermediate
quantities from one section to the next, in the order of DESIGN.md §2:
geometry -> dispersion -> binary -> spin/glitch phase.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from timingkit.model.parameters import Parameter
from timingkit.geometry.observations import Observations
from timingkit.numerics.timearray import SplitTime


@dataclass
class Evaluation:
    obs: Observations
    direction: np.ndarray | None = None          # (N, 3) unit vectors to the pulsar
    freq_bary_mhz: np.ndarray | None = None
    roemer_s: np.ndarray | None = None
    shapiro_s: np.ndarray | None = None
    dispersion_s: np.ndarray | None = None
    binary_s: np.ndarray | None = None
    other_delay_s: np.ndarray | None = None      # group offsets and other plain delays
    t_bary: SplitTime | None = None              # after geometric/dispersion delays
    emit_offset_s: np.ndarray | None = None      # t_emit - tdb: roemer - shapiro - dispersion - other - binary
    t_emit: SplitTime | None = None              # in the pulsar frame (after binary)
    phase_int: np.ndarray | None = None          # integer part of the pulse phase
    phase_frac: np.ndarray | None = None         # fractional part in [-0.5, 0.5]
    spin_frequency_hz: np.ndarray | None = None  # instantaneous frequency at t_emit
    extra: dict = field(default_factory=dict)    # scratch space for the sections

    def zeros(self) -> np.ndarray:
        return np.zeros(len(self.obs))


class ModelSection:
    """Base class. ``section`` names the model-file section."""

    section: str = ""
    contribution: str = "propagation"   # "sky_path" | "propagation" | "orbit" | "rotation" | "noise"

    def parameters(self) -> list[Parameter]:
        return []

    def apply(self, ev: Evaluation) -> None:  # pragma: no cover - interface
        """Add this section's contribution to ``ev``."""
        raise NotImplementedError

    def partials(self, ev: Evaluation, names: list[str]) -> dict[str, np.ndarray]:
        """Sky-path, propagation and orbit sections: d(t_emit)/d(parameter) in
        seconds per parameter unit (how far the emission time moves).
        Rotation sections: d(phase, cycles)/d(parameter)."""
        return {}

    def unconstrained(self, obs: Observations, names: list[str]) -> list[str]:
        """Messages naming free parameters these TOAs cannot measure at all."""
        return []

    def to_section(self) -> dict:
        return {}

    def warnings(self, median_error_us: float | None = None) -> list[str]:
        """Cautions about the section's own values; ``median_error_us`` (the
        TOAs' median error, when known) sets how large a neglected term may be."""
        return []


def notable_delay_s(median_error_us: float | None = None) -> float:
    """The size from which a neglected delay is worth a warning: 1 ns or a
    tenth of the median TOA error, whichever is larger."""
    if median_error_us is None or not np.isfinite(median_error_us):
        return 1e-9
    return max(1e-9, 0.1 * float(median_error_us) * 1e-6)
