"""Photon event lists in memory, and the one reader for both file kinds.

An :class:`EventList` holds the arrival time of every event as float64
seconds (``seconds``, plus an optional low part ``seconds_lo``) from a
reference epoch ``reference_day + reference_frac`` (integer MJD + a
double-double fraction of a day) on the scale ``scale`` ('tt', 'tdb', 'utc'),
observed at ``timeref`` ('local', 'geocentric', 'solarsystem'). For a FITS
list the reference is MJDREF + TIMEZERO, so ``seconds`` is the TIME column
itself (times ``TIMEUNIT``): nothing per event is rounded on reading. An event
is timed at the centre of its time bin (OGIP ``TIMEDEL``, ``TIMEPIXR``; see
timingkit.formats.ogip_time): ``bin_centre_shift_s`` is added, exactly, to the
reference (``timed_reference_frac``), never to the events one by one.

Readers: :func:`read_event_list` picks FITS (``timingkit.formats.event_fits``)
or plain text (``timingkit.formats.event_text``) from the file's first bytes.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np

from timingkit.formats.errors import InputError, excerpt
from timingkit.formats.textfile import is_fits_file
from timingkit.numerics.timearray import SECONDS_PER_DAY, SplitTime
from timingkit.numerics import ddmath

ENERGY_COLUMNS = ("energy", "pi", "pha", "channel")     # searched in this order


@dataclass(eq=False)
class EventList:
    """Events read from one file (see the module docstring).

    ``columns``: the input's columns by name (FITS: read on demand from
    ``table``); ``table`` / ``header`` / ``hdu_name``: the FITS events table
    (raw rows, kept for writing them back unchanged); ``gti_s``: (K, 2) good
    time intervals in the units of ``seconds`` (None: no GTI given);
    ``bary_shift_s``: (reference - MJDREF) in seconds, so that a barycentric
    time ``t`` (seconds from the reference) is ``t + bary_shift_s`` seconds
    from MJDREF read as a TDB date; ``site``: the site named by the file;
    ``observer_itrf_m``: OBSGEO-X/Y/Z when given; ``observatory_names``:
    [(keyword, value)] of OBSERVAT and TELESCOP, the events table's before the
    primary header's; ``notes``: facts for the
    report (keywords defaulted, clock state); ``bin_centre_shift_s``: (hi, lo)
    seconds from a TIME stamp to its bin's centre, ``time_bin_s`` the bin width
    (TIMEDEL, s; None when not given), ``time_pixel_reference`` TIMEPIXR.
    ``utc_elapsed_seconds``: UTC ``seconds`` are elapsed SI seconds from MJDREF
    (FITS TIME columns), not the fraction of a UTC day (text MJDs).
    """
    path: str
    kind: str
    reference_day: int
    reference_frac: tuple[float, float]
    seconds: np.ndarray
    scale: str
    timeref: str
    seconds_lo: np.ndarray | None = None
    mjdref: tuple[int, float] = (0, 0.0)
    bary_shift_s: float = 0.0
    columns: dict = field(default_factory=dict)
    table: np.ndarray | None = None
    header: object = None
    primary_header: object = None
    hdu_name: str = "EVENTS"
    gti_s: np.ndarray | None = None
    gti_hdu: object = None
    site: str | None = None
    observer_itrf_m: np.ndarray | None = None
    observatory_names: list = field(default_factory=list)
    clock_applied: bool | None = None
    energy_column: str | None = None
    energy_unit: str = ""
    notes: list[str] = field(default_factory=list)
    keywords: dict = field(default_factory=dict)
    reader: object = None          # callable(name) -> column values (FITS, on demand)
    bin_centre_shift_s: tuple[float, float] = (0.0, 0.0)
    time_bin_s: float | None = None
    time_pixel_reference: float = 0.5
    utc_elapsed_seconds: bool = False

    @property
    def timed_reference_frac(self) -> tuple[float, float]:
        """(hi, lo) fraction of a day of the reference the events are timed from:
        ``reference_frac`` plus the shift to the bin centre (double-double)."""
        shift = ddmath.dd_div_d(*self.bin_centre_shift_s, SECONDS_PER_DAY)
        return tuple(float(x) for x in ddmath.dd_add(*self.reference_frac, *shift))

    def __len__(self) -> int:
        return len(self.seconds)

    def column(self, name: str) -> np.ndarray:
        """Values of the input column ``name`` (any case)."""
        for key in self.column_names():
            if key.lower() == name.lower():
                if key not in self.columns and self.reader is not None:
                    self.columns[key] = self.reader(key)
                return self.columns[key]
        raise InputError(f"no column {excerpt(name)}; the event list has: "
                         f"{', '.join(self.column_names())}", path=self.path, field=name,
                         quoted=(name,))

    def column_names(self) -> list[str]:
        if self.table is not None:
            return list(self.table.dtype.names)
        return list(self.columns)

    def times(self, index=None) -> SplitTime:
        """The event times (all, or ``index``) as a SplitTime on ``scale``, at
        the centres of their time bins, as MJDs (reference + seconds / 86400).
        For a FITS list on UTC that is the UTC date only while no leap second
        lies between MJDREF and the event (its seconds are elapsed seconds):
        ``timingkit.events.barycentre.event_clock`` gives TT exactly."""
        index = np.arange(len(self)) if index is None else index
        hi = take(self.seconds, index)
        lo = None if self.seconds_lo is None else take(self.seconds_lo, index)
        return split_time_from_seconds(self.reference_day, self.timed_reference_frac, hi, lo,
                                       self.scale)

    def span_seconds(self) -> tuple[float, float]:
        return float(np.min(self.seconds)), float(np.max(self.seconds))


def split_time_from_seconds(reference_day: int, reference_frac, seconds_hi, seconds_lo,
                            scale: str) -> SplitTime:
    """reference_day + reference_frac + seconds / 86400 as a SplitTime (the
    seconds are added in double-double, so < 1e-16 day is lost)."""
    hi = np.asarray(seconds_hi, dtype=float)
    lo = np.zeros_like(hi) if seconds_lo is None else np.asarray(seconds_lo, dtype=float)
    d_hi, d_lo = ddmath.dd_div_d(hi, lo, SECONDS_PER_DAY)
    f_hi, f_lo = ddmath.dd_add(d_hi, d_lo, np.full_like(hi, reference_frac[0]),
                               np.full_like(hi, reference_frac[1]))
    whole = np.floor(f_hi)
    f_hi, f_lo = ddmath.dd_add_d(f_hi, f_lo, -whole)
    return SplitTime(reference_day + whole, f_hi + f_lo, scale).normalized()


def pick_energy_column(names, wanted: str | None, path) -> str | None:
    """The energy or channel column: ``wanted`` if given (must exist), else the
    first of ENERGY, PI, PHA, CHANNEL (any case, also 'energy_kev' etc.)."""
    lower = {n.lower(): n for n in names}
    if wanted is not None:
        if wanted.lower() not in lower:
            raise InputError(f"no column {excerpt(wanted)} for the energy selection; the event "
                             f"list has: {', '.join(names)}", path=path, field="energy_column",
                             quoted=(wanted,))
        return lower[wanted.lower()]
    for candidate in ENERGY_COLUMNS:
        for low, name in lower.items():
            if low == candidate or low.startswith(candidate + "_"):
                return name
    return None


def select_events(events: EventList, energy_range=None, energy_column: str | None = None):
    """Indices of the events inside the good time intervals and, with
    ``energy_range`` (lo, hi), with lo <= energy < hi. Returns (index, facts)
    where facts records what was selected for the report."""
    n = len(events)
    keep = np.ones(n, dtype=bool)
    facts = {"events_in_file": n}
    if events.gti_s is not None:
        starts, stops = merged_intervals(events.gti_s)
        if len(starts) <= 4:          # a few intervals: comparisons beat a search
            inside = np.zeros(n, dtype=bool)
            for start, stop in zip(starts, stops):
                inside |= (events.seconds >= start) & (events.seconds < stop)
        else:
            slot = np.searchsorted(starts, events.seconds, side="right") - 1
            inside = (slot >= 0) & (events.seconds < stops[np.maximum(slot, 0)])
        keep &= inside
        facts["outside_gti"] = int(n - np.count_nonzero(inside))
        facts["gti_exposure_s"] = float(np.sum(stops - starts))
        facts["gti_intervals"] = int(len(starts))
    if energy_range is not None:
        lo, hi = (float(x) for x in energy_range)
        if not lo < hi:
            raise InputError(f"the energy range must have LO < HI, found {lo} {hi}",
                             field="energy_range")
        name = pick_energy_column(events.column_names(), energy_column or events.energy_column,
                                  events.path)
        if name is None:
            raise InputError("--energy-range needs an energy or channel column (ENERGY, PI, "
                             "PHA or CHANNEL, or name one with --energy-column); the event "
                             f"list has: {', '.join(events.column_names())}", path=events.path,
                             field="energy_range")
        values = np.asarray(events.column(name), dtype=float)
        in_band = (values >= lo) & (values < hi)
        keep &= in_band
        unit = events.energy_unit if name == events.energy_column else ""
        facts["energy_selection"] = {"column": name, "unit": unit, "low": lo, "high": hi,
                                     "outside_range": int(n - np.count_nonzero(in_band))}
    index = np.arange(n) if keep.all() else np.flatnonzero(keep)
    facts["events_selected"] = int(len(index))
    return index, facts


def take(values: np.ndarray, index: np.ndarray) -> np.ndarray:
    """values[index] for a sorted index from ``select_events``: a view, not a
    copy, when it selects every row."""
    return values if len(index) == len(values) else values[index]


def merged_intervals(intervals) -> tuple[np.ndarray, np.ndarray]:
    """Sorted, non-overlapping (starts, stops) of (K, 2) intervals."""
    gti = np.asarray(intervals, dtype=float).reshape(-1, 2)
    gti = gti[np.argsort(gti[:, 0], kind="stable")]
    starts, stops = [], []
    for start, stop in gti:
        if stop <= start:
            continue
        if starts and start <= stops[-1]:
            stops[-1] = max(stops[-1], stop)
        else:
            starts.append(start)
            stops.append(stop)
    return np.array(starts), np.array(stops)


def read_event_list(path, scale: str | None = None, site: str | None = None) -> EventList:
    """A FITS or plain-text event list; ``scale`` and ``site`` are used for a
    text list (and override its header comments)."""
    path = os.fspath(path)
    if is_fits_file(path, "event list"):
        from timingkit.formats.event_fits import read_fits_events
        return read_fits_events(path)
    from timingkit.formats.event_text import read_text_events
    return read_text_events(path, scale=scale, site=site)
