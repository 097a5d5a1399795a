"""Where a predictor's segments begin and end.

A segment never crosses a time where the model's phase is not smooth, so the
span is first cut at:

- every 0h UTC (the Earth-orientation values are interpolated day by day, and
  a day with a leap second has 86401 s: each segment lies in one UTC day);
- the arrival at the site of each glitch (its epoch is TDB at the pulsar);
- the edges of the model's DM-offset ranges (MJDs of the TOAs as given);
- the nodes of clock-correction tables for the site (linear interpolation).

The pieces are then split into equal segments no longer than a given length.
Edges are exact decimal MJD strings (20 significant digits), so the file, the
builder and the reader use the very same numbers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from timingkit.formats.mjd_text import format_mjd, parse_mjd_strings
from timingkit.geometry import timescales
from timingkit.model.glitch import model_glitches
from timingkit.model.timing_model import TimingModel
from timingkit.numerics.timearray import SplitTime
from timingkit.predict.model_phase import PhaseContext, evaluate_at

GLITCH_NEWTON_STEPS = 5        # site arrival of a glitch epoch to < 1e-9 s


@dataclass
class Segments:
    """Segment edges as exact MJD text, with their two-part values."""

    start_text: np.ndarray
    end_text: np.ndarray

    def __post_init__(self):
        self.start_text = np.asarray(self.start_text, dtype=str)
        self.end_text = np.asarray(self.end_text, dtype=str)
        self.start_day, self.start_frac = parse_mjd_strings(self.start_text)
        self.end_day, self.end_frac = parse_mjd_strings(self.end_text)

    def __len__(self) -> int:
        return len(self.start_text)

    @property
    def length_days(self) -> np.ndarray:
        return (self.end_day - self.start_day) + (self.end_frac - self.start_frac)

    def select(self, index) -> "Segments":
        return Segments(self.start_text[index], self.end_text[index])

    def times_at(self, x: np.ndarray) -> SplitTime:
        """Times at positions ``x`` in [-1, 1] of each segment: (segments, len(x))."""
        offset = (np.asarray(x)[None, :] + 1.0) * 0.5 * self.length_days[:, None]
        day = np.repeat(self.start_day[:, None], offset.shape[1], axis=1)
        frac = self.start_frac[:, None] + offset
        return SplitTime(day.ravel(), frac.ravel(), "utc").normalized()

    def bisected(self) -> "Segments":
        """Each segment split in two at its midpoint (rounded to the MJD text)."""
        mid = SplitTime(self.start_day, self.start_frac + 0.5 * self.length_days,
                        "utc").normalized()
        mid_text = format_mjd(mid.day, mid.frac)      # mid is normalised
        starts = np.column_stack([self.start_text, mid_text]).ravel()
        ends = np.column_stack([mid_text, self.end_text]).ravel()
        return Segments(starts, ends)


def mjd_text_of(day, frac) -> np.ndarray:
    """Exact MJD text (20 significant digits) of two-part times."""
    t = SplitTime(day, frac, "utc").normalized()
    return format_mjd(t.day, t.frac)


def day_lengths_s(first_day: int, last_day: int) -> dict[int, float]:
    """SI seconds in each UTC day first_day..last_day (86401 with a leap second)."""
    days = np.arange(first_day, last_day + 2, dtype=float)
    tt = timescales.utc_to_tt(SplitTime(days, np.zeros_like(days), "utc"))
    hi, lo = tt[1:].seconds_since(0.0, 0.0)
    prev_hi, prev_lo = tt[:-1].seconds_since(0.0, 0.0)
    length = np.round((hi - prev_hi) + (lo - prev_lo))
    return {int(d): float(s) for d, s in zip(days[:-1], length)}


def _glitch_arrivals(model: TimingModel, site: str, freq_mhz: float, start: SplitTime,
                     end: SplitTime, context: PhaseContext) -> list[SplitTime]:
    """Site times (UTC) at which each glitch epoch (TDB at the pulsar) arrives."""
    out = []
    lo, hi = start.mjd[0] - 1.0, end.mjd[0] + 1.0
    for glitch in model_glitches(model):
        if not lo <= glitch.epoch_mjd <= hi:
            continue
        t = SplitTime(glitch.epoch_day, glitch.epoch_frac, "utc")
        for _ in range(GLITCH_NEWTON_STEPS):
            ev = evaluate_at(model, t, site, freq_mhz, context)
            t = t.add_seconds(-glitch.dt_seconds(ev))
        out.append(t)
    return out


def cut_points(model: TimingModel, site: str, freq_mhz: float, start: SplitTime,
               end: SplitTime, context: PhaseContext) -> list[SplitTime]:
    """Times strictly inside (start, end) where a segment must end (see module doc)."""
    points = [SplitTime(d, 0.0, "utc") for d in
              np.arange(np.floor(start.mjd[0]) + 1.0, np.ceil(end.mjd[0]))]
    for a, b in model.dispersion.offset_ranges:
        for edge in (a, b):
            points.append(SplitTime(np.floor(edge), edge - np.floor(edge), "utc"))
    for table in context.clocks:
        if table.applies_to(site):
            whole = np.floor(table.mjd)
            points.extend(SplitTime(d, f, "utc") for d, f in zip(whole, table.mjd - whole))
    points.extend(_glitch_arrivals(model, site, freq_mhz, start, end, context))

    def inside(t: SplitTime) -> bool:
        after = (t.day[0] - start.day[0]) + (t.frac[0] - start.frac[0])
        before = (end.day[0] - t.day[0]) + (end.frac[0] - t.frac[0])
        return after > 0 and before > 0
    return [t for t in points if inside(t)]


def plan_segments(start_text: str, end_text: str, cuts: list[SplitTime],
                  max_length_days: float, fixed_length: bool) -> Segments:
    """Segments from start to end, cut at ``cuts``; each piece is split into
    equal segments no longer than ``max_length_days`` or, with
    ``fixed_length``, into segments of exactly that length from the piece's
    start (the last one shorter)."""
    edges = [start_text, *(str(mjd_text_of(t.day, t.frac)[0]) for t in cuts), end_text]
    day, frac = parse_mjd_strings(edges)
    order = np.lexsort((frac, day))
    edges = [edges[i] for i in order]
    day, frac = day[order], frac[order]
    keep = np.r_[True, (day[1:] != day[:-1]) | (frac[1:] != frac[:-1])]
    edges = [e for e, k in zip(edges, keep) if k]
    day, frac = day[keep], frac[keep]
    starts, ends = [], []
    for i in range(len(edges) - 1):
        length = (day[i + 1] - day[i]) + (frac[i + 1] - frac[i])
        if fixed_length:
            count = int(np.ceil(length / max_length_days * (1 - 1e-12)))
            offsets = np.minimum(np.arange(1, count) * max_length_days, length)
        else:
            count = max(1, int(np.ceil(length / max_length_days * (1 - 1e-12))))
            offsets = np.arange(1, count) * (length / count)
        inner = mjd_text_of(np.full(len(offsets), day[i]), frac[i] + offsets) if count > 1 else []
        piece = [edges[i], *[str(t) for t in inner], edges[i + 1]]
        starts.extend(piece[:-1])
        ends.extend(piece[1:])
    return Segments(starts, ends)


def seconds_per_day_of(segments: Segments) -> np.ndarray:
    """SI seconds in the UTC day of each segment (segments lie in one day)."""
    first, last = int(segments.start_day.min()), int(segments.start_day.max())
    lengths = day_lengths_s(first, last)
    return np.array([lengths[int(d)] for d in segments.start_day])


__all__ = ["Segments", "cut_points", "plan_segments", "seconds_per_day_of"]
