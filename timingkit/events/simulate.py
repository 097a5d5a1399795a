"""Simulated photon events that a timing model predicts, for tests and demos.

Events arrive as a Poisson process of ``rate_per_s`` over [start, end] on the
scale the list is written in (UTC at a site, TT at the geocentre or on a
spacecraft, TDB at the barycentre). Each is pulsed with probability
``pulsed_fraction``: its pulse phase is drawn from the profile template and
its time moved (by under half a period) to the nearest time at which the
model gives that phase, by Newton steps through the same barycentring as
``timingkit events`` (converged to < 1e-9 cycles before the times are rounded
to float64 seconds); the others keep their uniform times. Energies are drawn
log-uniform between 0.5 and 10 keV for both (an invented spectrum, the same
for pulsed and unpulsed events). Deterministic for a given seed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from timingkit.events.barycentre import EventClock, time_events
from timingkit.events.template import PulseTemplate
from timingkit.formats.errors import InputError
from timingkit.geometry.observer import Observer
from timingkit.geometry.utc_seconds import utc_elapsed_to_tt
from timingkit.numerics.timearray import SECONDS_PER_DAY, SplitTime

ENERGY_RANGE_KEV = (0.5, 10.0)
MAX_EVENTS = 50_000_000
CONVERGED_CYCLES = 1e-9


@dataclass
class SimulatedEvents:
    """``seconds``: TIME values (s from MJDREF ``reference_day``, on ``scale``),
    sorted; ``energy_kev``; ``pulsed``: which were pulsed; ``gti_s`` (1, 2)."""
    reference_day: int
    scale: str
    seconds: np.ndarray
    energy_kev: np.ndarray
    pulsed: np.ndarray
    gti_s: np.ndarray


def simulate_events(model, observer: Observer, ephemeris, start_mjd: float, end_mjd: float,
                    rate_per_s: float, pulsed_fraction: float, template: PulseTemplate,
                    reference=None, seed: int | None = None) -> SimulatedEvents:
    """Events of ``observer`` (see the module docstring)."""
    if not end_mjd > start_mjd:
        raise InputError("the end must be later than the start", field="end_mjd")
    if not rate_per_s > 0:
        raise InputError(f"the event rate must be > 0 per s, found {rate_per_s}", field="rate_per_s")
    if not 0.0 <= pulsed_fraction <= 1.0:
        raise InputError(f"the pulsed fraction must lie in [0, 1], found {pulsed_fraction}",
                         field="pulsed_fraction")
    rng = np.random.default_rng(seed)
    reference_day = math.floor(start_mjd)
    first = (start_mjd - reference_day) * SECONDS_PER_DAY
    last = (end_mjd - reference_day) * SECONDS_PER_DAY
    expected = rate_per_s * (last - first)
    if expected > MAX_EVENTS:
        raise InputError(f"{expected:.3g} events expected; at most {MAX_EVENTS:.0e} per list",
                         field="rate_per_s")
    count = int(rng.poisson(expected))
    seconds = np.sort(rng.uniform(first, last, count))
    pulsed = rng.random(count) < pulsed_fraction
    energy = np.exp(rng.uniform(*np.log(ENERGY_RANGE_KEV), count)).astype(np.float32)
    rows = np.flatnonzero(pulsed)
    if len(rows):
        target = template.sample(len(rows), rng)
        seconds[rows] = _move_to_phase(model, observer, ephemeris, reference, reference_day,
                                       seconds[rows], target)
    inside = (seconds >= first) & (seconds <= last)
    order = np.argsort(seconds[inside], kind="stable")
    return SimulatedEvents(reference_day=reference_day, scale=observer.input_scale,
                           seconds=seconds[inside][order], energy_kev=energy[inside][order],
                           pulsed=pulsed[inside][order], gti_s=np.array([[first, last]]))


def _move_to_phase(model, observer, ephemeris, reference, reference_day, seconds, target):
    """Times near ``seconds`` (output scale) whose model phase is ``target``.
    UTC TIME values are elapsed seconds from MJDREF, as ``timingkit events``
    reads them: on TT they count from TT(MJDREF) (timingkit.geometry.utc_seconds)."""
    start = (0.0, 0.0)
    if observer.input_scale == "utc":
        start = utc_elapsed_to_tt(reference_day, 0.0).tt_reference_frac(start)
    hi = seconds.copy()
    scale = observer.continuous_scale
    for _ in range(8):
        clock = EventClock(reference_day, start, hi, None, scale)
        timing = time_events(clock, model, observer, ephemeris, reference, want_frequency=True)
        offset = (target - timing.phase + 0.5) % 1.0 - 0.5
        hi = hi + offset / timing.frequency_hz
        if np.max(np.abs(offset)) < CONVERGED_CYCLES:
            break
    return hi


EARTH_GM_M3_S2 = 3.986004418e14      # IERS Conventions 2010, Table 1.1 (TT-compatible)


def circular_orbit(start_mjd: float, end_mjd: float, step_s: float = 60.0,
                   altitude_km: float = 550.0, inclination_deg: float = 28.5,
                   node_deg: float = 0.0):
    """An invented circular orbit for simulations: (TT times, GCRS position m,
    velocity m/s), Keplerian about a point-mass Earth (GM from the IERS
    Conventions 2010), every ``step_s`` seconds from start to end (TT)."""
    radius = 6378137.0 + altitude_km * 1e3
    rate = math.sqrt(EARTH_GM_M3_S2 / radius ** 3)
    day = math.floor(start_mjd)
    seconds = np.arange((start_mjd - day) * SECONDS_PER_DAY,
                        (end_mjd - day) * SECONDS_PER_DAY + step_s, step_s)
    angle = rate * seconds
    inc, node = math.radians(inclination_deg), math.radians(node_deg)
    in_plane = np.stack([np.cos(angle), np.sin(angle), np.zeros_like(angle)], axis=1)
    speed = np.stack([-np.sin(angle), np.cos(angle), np.zeros_like(angle)], axis=1)
    tilt = np.array([[1, 0, 0], [0, math.cos(inc), -math.sin(inc)],
                     [0, math.sin(inc), math.cos(inc)]])
    turn = np.array([[math.cos(node), -math.sin(node), 0], [math.sin(node), math.cos(node), 0],
                     [0, 0, 1]])
    rotation = turn @ tilt
    times = SplitTime(np.full(len(seconds), float(day)), seconds / SECONDS_PER_DAY, "tt")
    return (times.normalized(), radius * in_plane @ rotation.T,
            radius * rate * speed @ rotation.T)
