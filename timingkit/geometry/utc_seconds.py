"""UTC seconds of OGIP TIME columns carried to TT: one constant, not a
conversion per event.

A FITS table on ``TIMESYS = 'UTC'`` counts ``TIMEZERO + TIME`` in elapsed SI
seconds from ``MJDREF``, a UTC date (a relative time of the FITS time
standard, Rots et al. 2015, A&A 574, A36; astropy.time counts it the same
way: ``Time(MJDREF, scale='utc') + TimeDelta(TIME)`` adds elapsed seconds).
Elapsed seconds are the same seconds on TT, so an event's TT is TT(MJDREF) +
TIMEZERO + TIME: TT - UTC at MJDREF (the bundled leap seconds through ERFA,
``timescales.tt_minus_utc_s``; n + 32.184 s exactly from 1972 on) is added
once to the reference, in double-double, and the events keep their TIME
values. Leap seconds between MJDREF and the events then need nothing more, and
the events' own dates may lie past the leap-second table's expiry.

A mission whose TIME counts UTC clock readings (86400 s to every day) instead
would have its events after a leap second timed 1 s early per leap second, so
:func:`utc_elapsed_to_tt` says when a leap second lies between MJDREF and the
events.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from timingkit.geometry import timescales
from timingkit.numerics import ddmath
from timingkit.numerics.timearray import SECONDS_PER_DAY, SplitTime


@dataclass
class UtcElapsed:
    """``tt_minus_utc_s``: TT - UTC at MJDREF (s), to add to the reference of
    UTC elapsed seconds; ``notes``: what the report should say."""
    tt_minus_utc_s: float
    notes: list = field(default_factory=list)

    def tt_reference_frac(self, reference_frac) -> tuple[float, float]:
        """(hi, lo) fraction of a day of the reference on TT (exact to ~1e-32 day)."""
        shift = ddmath.dd_div_d(self.tt_minus_utc_s, 0.0, SECONDS_PER_DAY)
        return tuple(float(x) for x in ddmath.dd_add(float(reference_frac[0]),
                                                     float(reference_frac[1]), *shift))


def utc_elapsed_to_tt(mjdref_day: int, mjdref_frac: float, first_tt_mjd: float | None = None,
                      last_tt_mjd: float | None = None, what: str = "events") -> UtcElapsed:
    """TT - UTC at the UTC date ``mjdref_day + mjdref_frac`` and, when the
    span of the times (TT MJDs) is given, notes on leap seconds inside it and
    on a reference past the bundled leap-second table."""
    utc = SplitTime(np.array([float(mjdref_day)]), np.array([float(mjdref_frac)]), "utc")
    conversion = UtcElapsed(float(timescales.tt_minus_utc_s(utc, timescales.utc_to_tt(utc))[0]))
    end = timescales.leap_second_table_end_mjd()
    if np.isfinite(end) and mjdref_day + mjdref_frac > end:
        conversion.notes.append(
            f"the reference date MJDREF (MJD {mjdref_day + mjdref_frac:.6f}, UTC) lies past "
            f"MJD {end:.0f}, where the bundled leap-second table expires: TT - UTC there "
            "assumes no further leap seconds (update astropy / astropy-iers-data for a newer "
            "table)")
    if first_tt_mjd is None or last_tt_mjd is None:
        return conversion
    ends_tt = np.array([first_tt_mjd, last_tt_mjd], dtype=float)
    ends_utc = timescales.tt_to_utc(SplitTime(np.floor(ends_tt), ends_tt - np.floor(ends_tt),
                                              "tt"))
    days = np.concatenate([[float(mjdref_day)], np.floor(ends_utc.mjd)])
    offsets = timescales.tt_minus_utc_on_days(days)
    leaps = int(round(max(abs(offsets[1] - offsets[0]), abs(offsets[2] - offsets[0]))))
    if leaps:
        conversion.notes.append(
            f"{leaps} leap second(s) lie between the reference date MJDREF (UTC) and the "
            f"{what}: TIME on UTC is read as elapsed SI seconds from MJDREF (the FITS time "
            "standard's relative time, as astropy.time adds it); if the mission's TIME counts "
            f"UTC clock readings (86400 s to every day) instead, {what} beyond a leap second "
            "are timed 1 s early per leap second (lists on TT have no such ambiguity)")
    return conversion
