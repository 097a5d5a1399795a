"""Pulse phase and barycentric time of every photon event.

The exact chain is the one TOAs take: event times -> ``Observer.observations``
(time scales and geometry, timingkit.geometry) -> ``TimingModel.evaluate``
(delays, binary, spin and glitch phase). It costs a few µs per time, mostly
the ephemeris, so for many events it runs only at the nodes of a uniform grid
in the event clock (a power-of-two step in seconds, so node times are exact)
and the phase and the barycentric offset t_bary - t are carried to each event
by four-point cubic interpolation (timingkit.numerics.grid_cubic) from the
nodes around its cell. Both functions are smooth: the fastest terms are a
low orbit's Roemer delay (~23 ms over ~95 min) and a binary orbit.

The step is chosen by measurement, not assumed: starting from a step suited
to the observer, the exact chain is evaluated at the midpoints of up to 256
cells spread over the data (where the interpolation error peaks) and the step
is halved until the largest difference, in phase (as time) and in
barycentric time, is below ``tolerance_ns`` (1 ns by default). The measured
largest difference is reported. Cells whose nodes straddle a glitch epoch,
where the phase has a kink, or reach past a spacecraft's orbit table, are
evaluated exactly per event, and so is everything when the events are too few
(under 4,096) or too sparse for nodes to pay (more nodes than half the events).
The whole path is vectorised (no Python loop per event; events in chunks of
10^6 to bound memory).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from timingkit.formats.event_list import EventList, split_time_from_seconds, take
from timingkit.geometry.ephemeris import Ephemeris
from timingkit.geometry.observer import Observer
from timingkit.geometry.utc_seconds import utc_elapsed_to_tt
from timingkit.model.timing_model import TimingModel
from timingkit.numerics.grid_cubic import cubic_slope, evaluate_cubic, four_point_coefficients
from timingkit.numerics.timearray import SECONDS_PER_DAY, SplitTime

CHUNK = 1_000_000
EXACT_BELOW = 4096             # events: fewer are evaluated exactly
CHECK_CELLS = 256
DENSE_CELLS = 2_000_000       # cells: up to this many, per-cell arrays are indexed directly
CHECK_SAMPLE = 50_000          # events sampled to find the occupied cells while checking
TOLERANCE_NS = 1.0
MAX_HALVINGS = 14
FIRST_STEP_S = {"spacecraft": 32.0, "earth": 256.0, "geocentre": 1024.0, "ssb": 4096.0}


@dataclass
class EventClock:
    """Event times on a continuous scale: ``reference_day + reference_frac +
    (seconds + seconds_lo) / 86400`` on ``scale`` ('tt' or 'tdb'); ``notes``:
    warnings of the conversion (leap seconds) for the report."""
    reference_day: int
    reference_frac: tuple[float, float]
    seconds: np.ndarray
    seconds_lo: np.ndarray | None
    scale: str
    notes: list = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.seconds)

    def at(self, seconds, seconds_lo=None) -> SplitTime:
        return split_time_from_seconds(self.reference_day, self.reference_frac, seconds,
                                       seconds_lo, self.scale)

    def select(self, index) -> "EventClock":
        lo = None if self.seconds_lo is None else self.seconds_lo[index]
        return EventClock(self.reference_day, self.reference_frac, self.seconds[index], lo,
                          self.scale, self.notes)


def event_clock(events: EventList, index, observer: Observer) -> EventClock:
    """The selected events' times, at the centres of their time bins, on the
    observer's continuous scale. UTC TIME values of a FITS list are elapsed
    seconds from MJDREF: TT - UTC at MJDREF goes into the reference, once
    (timingkit.geometry.utc_seconds); UTC MJDs of a text list go to TT through
    ERFA per event; other scales are taken as they are."""
    reference = events.timed_reference_frac
    seconds = take(events.seconds, index)
    lo = None if events.seconds_lo is None else take(events.seconds_lo, index)
    if events.scale != "utc":
        return EventClock(events.reference_day, reference, seconds, lo, events.scale)
    if events.utc_elapsed_seconds:
        first, last = (float(np.min(seconds)), float(np.max(seconds))) if len(seconds) else (0, 0)
        base = events.reference_day + reference[0] + reference[1]
        conversion = utc_elapsed_to_tt(*events.mjdref, base + first / SECONDS_PER_DAY,
                                       base + last / SECONDS_PER_DAY)
        return EventClock(events.reference_day, conversion.tt_reference_frac(reference),
                          seconds, lo, "tt", notes=conversion.notes)
    tt = observer.to_continuous(events.times(index))
    hi, lo = tt.seconds_since(float(events.reference_day), 0.0)
    return EventClock(events.reference_day, (0.0, 0.0), hi, lo, "tt")


@dataclass
class EventTiming:
    """``phase``: model pulse phase in [0, 1); ``bary_offset_s``: barycentric TDB
    minus the event time on its clock (s); ``frequency_hz``: d(phase)/dt on the
    event clock (when asked for); ``accuracy``: how it was computed."""
    phase: np.ndarray
    bary_offset_s: np.ndarray
    frequency_hz: np.ndarray | None = None
    accuracy: dict = field(default_factory=dict)


@dataclass
class _Exact:
    phase_int: np.ndarray
    phase_frac: np.ndarray
    bary_offset_s: np.ndarray
    frequency_hz: np.ndarray
    emit_mjd: np.ndarray


class _Chain:
    """The exact chain at given clock seconds, in chunks."""

    def __init__(self, clock: EventClock, model: TimingModel, observer: Observer,
                 ephemeris: Ephemeris, reference):
        self.clock, self.model, self.observer = clock, model, observer
        self.ephemeris, self.reference = ephemeris, reference
        self.planets = model.settings["shapiro_delay_planets"]    # true, false or a list
        self.warnings: list[str] = []

    def __call__(self, seconds, seconds_lo=None) -> _Exact:
        seconds = np.asarray(seconds, dtype=float)
        parts = []
        for start in range(0, max(len(seconds), 1), CHUNK // 4):
            part = slice(start, start + CHUNK // 4)
            lo = None if seconds_lo is None else seconds_lo[part]
            times = self.clock.at(seconds[part], lo)
            obs = self.observer.observations(times, self.ephemeris, self.planets)
            self.warnings.extend(w for w in obs.warnings if w not in self.warnings)
            ev = self.model.evaluate(obs, self.reference)
            bary = ((ev.t_bary.day - times.day) + (ev.t_bary.frac - times.frac)) * SECONDS_PER_DAY
            parts.append(_Exact(ev.phase_int, ev.phase_frac, bary, ev.spin_frequency_hz,
                                ev.t_emit.mjd))
        return _Exact(*(np.concatenate([getattr(p, f) for p in parts]) for f in
                        ("phase_int", "phase_frac", "bary_offset_s", "frequency_hz", "emit_mjd")))


def _horner(coefficients, slot, x, value, scratch) -> None:
    """value = x (c1 + x (c2 + x c3)) with c = coefficients[i][slot], in place."""
    c1, c2, c3 = coefficients
    np.take(c3, slot, out=value)
    value *= x
    np.take(c2, slot, out=scratch)
    value += scratch
    value *= x
    np.take(c1, slot, out=scratch)
    value += scratch
    value *= x


def _wrap(phase: np.ndarray) -> np.ndarray:
    """Phase into [0, 1) (a value that rounds up to 1.0 becomes 0.0)."""
    phase = phase - np.floor(phase)
    phase[phase >= 1.0] = 0.0
    return phase


def _glitch_epochs(model: TimingModel) -> np.ndarray:
    return np.array([c.epoch_day + c.epoch_frac for c in model.rotation_sections()
                     if hasattr(c, "epoch_day")])


def _straddles(emit_first, emit_last, epochs) -> np.ndarray:
    """True where [emit_first, emit_last] (days) contains an epoch (with 1 ms margin)."""
    out = np.zeros(len(emit_first), dtype=bool)
    for epoch in epochs:
        out |= (emit_first - 1e-8 <= epoch) & (epoch <= emit_last + 1e-8)
    return out


def _cell_indices(seconds, origin: float, step: float) -> np.ndarray:
    """Cell of each time; exact, since the step is a power of two."""
    return ((seconds - origin) * (1.0 / step)).astype(np.int64)


def _occupied_cells(seconds, origin: float, step: float, cell_count: int) -> np.ndarray:
    """Sorted distinct cells holding events (a mark per cell while there are few cells)."""
    if cell_count <= DENSE_CELLS:
        mark = np.zeros(cell_count, dtype=bool)
        for start in range(0, len(seconds), CHUNK):
            mark[_cell_indices(seconds[start:start + CHUNK], origin, step)] = True
        return np.flatnonzero(mark)
    return np.unique(np.concatenate([np.unique(_cell_indices(seconds[start:start + CHUNK],
                                                             origin, step))
                                     for start in range(0, len(seconds), CHUNK)]))


def _stencil_values(exact: _Exact, slots: np.ndarray):
    """Phase (relative to the cell's left node) and barycentric offset at the
    four nodes of each stencil (rows of ``slots``); returns two (M, 4) arrays."""
    whole = exact.phase_int[slots] - exact.phase_int[slots[:, 1:2]]
    part = exact.phase_frac[slots] - exact.phase_frac[slots[:, 1:2]]
    return whole + part, exact.bary_offset_s[slots]


def _coefficients(values: np.ndarray):
    return four_point_coefficients(values[:, 0], values[:, 1], values[:, 2], values[:, 3])


def _check_step(chain: _Chain, origin: float, step: float, cells: np.ndarray, epochs, valid):
    """Largest interpolation error (s) at the midpoints of ``cells``."""
    if valid is not None:
        cells = cells[((cells - 1) * step + origin >= valid[0])
                      & ((cells + 2) * step + origin <= valid[1])]
        if len(cells) == 0:
            return 0.0
    offsets = np.arange(-1, 3)
    nodes = origin + (cells[:, None] + offsets[None, :]) * step
    mids = origin + (cells + 0.5) * step
    exact = chain(np.concatenate([nodes.ravel(), mids]))
    m = len(cells)
    slots = np.arange(4 * m).reshape(m, 4)
    phase_values, bary_values = _stencil_values(exact, slots)
    keep = ~_straddles(exact.emit_mjd[slots[:, 0]], exact.emit_mjd[slots[:, 3]], epochs)
    if not np.any(keep):
        return 0.0
    mid = 4 * m + np.arange(m)
    phase_mid = (exact.phase_int[mid] - exact.phase_int[slots[:, 1]]) + \
        (exact.phase_frac[mid] - exact.phase_frac[slots[:, 1]])
    phase_error = np.abs(evaluate_cubic(_coefficients(phase_values), 0.5) - phase_mid)
    bary_error = np.abs(evaluate_cubic(_coefficients(bary_values), 0.5) - exact.bary_offset_s[mid])
    error_s = np.maximum(phase_error / np.abs(exact.frequency_hz[mid]), bary_error)
    return float(np.max(error_s[keep]))


def _choose_step(chain, seconds, step, tolerance_s, epochs, valid):
    """The largest step (halving from ``step``) whose measured error is below
    the tolerance; None when none down to the smallest tried."""
    stride = max(1, len(seconds) // CHECK_SAMPLE)
    sample = seconds[::stride]
    start = float(np.min(seconds))
    error = np.inf
    for _ in range(MAX_HALVINGS):
        origin = np.floor(start / step) * step
        cells = np.unique(np.floor((sample - origin) / step).astype(np.int64))
        pick = cells[np.unique(np.linspace(0, len(cells) - 1, min(CHECK_CELLS, len(cells)))
                               .astype(np.int64))]
        error = _check_step(chain, origin, step, pick, epochs, valid)
        if error <= tolerance_s:
            return step, origin, error, len(pick)
        step /= 2.0
    return None, None, error, 0


def time_events(clock: EventClock, model: TimingModel, observer: Observer,
                ephemeris: Ephemeris, reference=None, tolerance_ns: float = TOLERANCE_NS,
                want_frequency: bool = False, first_step_s: float | None = None) -> EventTiming:
    """Phase and barycentric offset of every event (see the module docstring).

    ``reference``: Observations of the model's [phase_zero] arrival (or None).
    """
    chain = _Chain(clock, model, observer, ephemeris, reference)
    seconds, lo = clock.seconds, clock.seconds_lo
    n = len(seconds)
    epochs = _glitch_epochs(model)
    plan = None
    if n >= EXACT_BELOW:
        step = first_step_s or FIRST_STEP_S[observer.kind]
        step, origin, error_s, checked = _choose_step(chain, seconds, step,
                                                      tolerance_ns * 1e-9, epochs,
                                                      valid_span(clock, observer))
        if step is not None:
            cell_count = int(_cell_indices(np.max(seconds), origin, step)) + 1
            cells = _occupied_cells(seconds, origin, step, cell_count)
            nodes = np.unique((cells[:, None] + np.arange(-1, 3)[None, :]).ravel())
            if len(nodes) <= n // 2:
                plan = (step, origin, error_s, checked, cells, cell_count, nodes)
    if plan is None:
        exact = chain(seconds, lo)
        frequency = exact.frequency_hz if want_frequency else None
        return EventTiming(_wrap(exact.phase_frac), exact.bary_offset_s, frequency,
                           {"method": "exact chain per event", "events_exact": n,
                            "max_interpolation_error_ns": 0.0, "warnings": chain.warnings})
    return _interpolate(chain, clock, plan, epochs, want_frequency, valid_span(clock, observer))


def valid_span(clock: EventClock, observer: Observer):
    """(first, last) clock seconds covered by the observer's geometry (a
    spacecraft's orbit table), or None when it covers all times."""
    if observer.kind != "spacecraft":
        return None
    ends = []
    for t in (observer.trajectory.start_tt, observer.trajectory.end_tt):
        hi, lo = t.seconds_since(float(clock.reference_day), 0.0)
        ends.append(float(hi[0] + lo[0]) - (clock.reference_frac[0] + clock.reference_frac[1])
                    * SECONDS_PER_DAY)
    return ends


def _interpolate(chain, clock, plan, epochs, want_frequency, valid) -> EventTiming:
    step, origin, error_s, checked, cells, cell_count, nodes = plan
    seconds, lo = clock.seconds, clock.seconds_lo
    exact = chain(origin + nodes * step)
    stencil = np.searchsorted(nodes, cells[:, None] + np.arange(-1, 3)[None, :])
    phase_values, bary_values = _stencil_values(exact, stencil)
    per_cell = [*_coefficients(phase_values)[1:], exact.phase_frac[stencil[:, 1]],
                *_coefficients(bary_values)]   # phase c0 = 0: relative to the left node
    dense = cell_count <= DENSE_CELLS
    if dense:                 # indexed by cell number: no look-up per event
        for i, values in enumerate(per_cell):
            per_cell[i] = np.full(cell_count, np.nan)
            per_cell[i][cells] = values
    n = len(seconds)
    phase = np.empty(n)
    bary = np.empty(n)
    frequency = np.empty(n) if want_frequency else None
    size = min(CHUNK, n)
    x, value, term = np.empty(size), np.empty(size), np.empty(size)
    k = np.empty(size, dtype=np.int64)
    for start in range(0, n, CHUNK):
        part = slice(start, min(start + CHUNK, n))
        m = part.stop - start
        xs, vs, ts, ks = x[:m], value[:m], term[:m], k[:m]
        np.subtract(seconds[part], origin, out=xs)
        xs *= 1.0 / step                                # exact (power-of-two step)
        ks[:] = xs                                      # truncation = floor (xs >= 0)
        xs -= ks
        if lo is not None:
            xs += lo[part] * (1.0 / step)
        slot = ks if dense else np.searchsorted(cells, ks)
        # Horner's rule in place: phase = left + x (c1 + x (c2 + x c3))
        _horner(per_cell[0:3], slot, xs, vs, ts)
        np.take(per_cell[3], slot, out=ts)
        vs += ts
        phase[part] = _wrap(vs)
        if want_frequency:
            c1, c2, c3 = (np.take(c, slot) for c in per_cell[0:3])
            frequency[part] = cubic_slope((0.0, c1, c2, c3), xs) / step
        _horner(per_cell[5:8], slot, xs, vs, ts)
        np.take(per_cell[4], slot, out=ts)
        np.add(vs, ts, out=bary[part])
    special = _straddles(exact.emit_mjd[stencil[:, 0]], exact.emit_mjd[stencil[:, 3]], epochs)
    if valid is not None:        # stencils reaching past the orbit table: no extrapolation
        special |= ((cells - 1) * step + origin < valid[0]) | \
            ((cells + 2) * step + origin > valid[1])
    special = np.flatnonzero(special)
    exact_events = 0
    if len(special):
        rows = np.flatnonzero(np.isin(_cell_indices(seconds, origin, step), cells[special]))
        direct = chain(seconds[rows], None if lo is None else lo[rows])
        phase[rows] = _wrap(direct.phase_frac)
        bary[rows] = direct.bary_offset_s
        if want_frequency:
            frequency[rows] = direct.frequency_hz
        exact_events = len(rows)
    accuracy = {"method": "exact chain at grid nodes, four-point cubic interpolation to events",
                "grid_step_s": step, "nodes": int(len(nodes)), "checked_cells": int(checked),
                "max_interpolation_error_ns": error_s * 1e9,
                "events_exact": exact_events,
                "note": "error measured at cell midpoints against the exact chain, in phase "
                        "(as time) and in barycentric time",
                "warnings": chain.warnings}
    return EventTiming(phase, bary, frequency, accuracy)
