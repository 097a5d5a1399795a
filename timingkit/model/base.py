"""The component interface of the timing model.

A component owns one section of the model file and some parameters. Delay
components add to the propagation delay (seconds) and give the partial
derivatives of their delay; phase components add pulse phase (cycles) at the
emission time and give phase partials. The :class:`Evaluation` carries the
intermediate quantities from one component to the next, in the order of
DESIGN.md §2: geometry -> dispersion -> binary -> spin/glitch phase.
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
    extra: dict = field(default_factory=dict)    # scratch space for components

    def zeros(self) -> np.ndarray:
        return np.zeros(len(self.obs))


class Component:
    """Base class. ``section`` names the model-file section."""

    section: str = ""
    kind: str = "delay"   # "geometry" | "delay" | "binary" | "phase"

    def parameters(self) -> list[Parameter]:
        return []

    def apply(self, ev: Evaluation) -> None:  # pragma: no cover - interface
        """Add this component's contribution to ``ev``."""
        raise NotImplementedError

    def partials(self, ev: Evaluation, names: list[str]) -> dict[str, np.ndarray]:
        """Geometry, delay and binary components: d(t_emit)/d(parameter) in
        seconds per parameter unit (how far the emission time moves).
        Phase components: d(phase, cycles)/d(parameter)."""
        return {}

    def unconstrained(self, obs: Observations, names: list[str]) -> list[str]:
        """Messages naming free parameters these TOAs cannot measure at all."""
        return []

    def to_section(self) -> dict:
        return {}

    def warnings(self) -> list[str]:
        return []
