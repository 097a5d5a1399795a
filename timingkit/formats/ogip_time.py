"""OGIP timing keywords of a FITS table header (OGIP memo OGIP/93-003, "The Proposed
Timing FITS File Format for High Energy Astrophysics Data", an open standard).

Times in such a table are ``TIME`` values counted in ``TIMEUNIT`` from the
reference ``MJDREFI + MJDREFF`` (or ``MJDREF``) plus ``TIMEZERO`` (or
``TIMEZERI + TIMEZERF``), on the scale ``TIMESYS``, observed at ``TIMEREF``.
Required here: the reference MJD and ``TIMESYS``; the memo's defaults are used
for the others (``TIMEUNIT = 's'``, ``TIMEZERO = 0``, ``TIMEREF = 'LOCAL'``,
``TIMEPIXR = 0.5``) and the report says which were defaulted.

Time bins: ``TIMEDEL`` (in ``TIMEUNIT``) is the width of the time bin an
event was stamped in and ``TIMEPIXR`` (0 to 1) where within that bin the TIME
value lies (0 its start, 0.5 its centre, 1 its end). timingkit times every
event at the centre of its bin: ``bin_centre_shift_s`` gives
(0.5 - TIMEPIXR) x TIMEDEL exactly, as a double-double, to be added to the
reference (no TIMEDEL: no shift, the TIME value is taken as the instant).

A keyword found in neither the table's header nor the primary header, or with
a value we cannot use, is an ``InputError`` naming the keyword and the HDU.

UTC time stamps: MJDREF is a UTC date and TIMEZERO + TIME count elapsed SI
seconds from it (the FITS time standard's relative time, Rots et al. 2015,
A&A 574, A36, as astropy.time adds it); timingkit.geometry.utc_seconds
carries them to TT. ``reference_day + reference_frac + TIME / 86400`` is then
the UTC date only while no leap second lies between MJDREF and the event.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from timingkit.formats.errors import InputError, excerpt_value
from timingkit.numerics import ddmath

SECONDS_PER_DAY = 86400.0
TIME_SYSTEMS = {"TT": "tt", "TDT": "tt", "TDB": "tdb", "UTC": "utc"}
TIME_REFERENCES = {"LOCAL": "local", "GEOCENTRIC": "geocentric",
                   "SOLARSYSTEM": "solarsystem", "BARYCENTRIC": "solarsystem"}
TIME_UNITS = {"s": 1.0, "d": SECONDS_PER_DAY}


@dataclass(frozen=True)
class TimeKeywords:
    """The timing keywords of one table.

    ``reference_day`` (integer MJD) and ``reference_frac_hi/lo`` (double-double
    fraction of a day, may exceed 1) give MJDREF + TIMEZERO, so that an event's
    time is ``reference_day + reference_frac + TIME * unit_s / 86400`` on
    ``scale`` ('tt', 'tdb' or 'utc'). ``timezero_s`` is TIMEZERO in seconds,
    ``mjdref_frac`` the fraction of MJDREF alone (without TIMEZERO).
    """
    hdu: str
    reference_day: int
    mjdref_frac: float
    timezero_s: float
    unit_s: float
    scale: str
    timeref: str
    keywords: dict = field(default_factory=dict)     # as found, for the report
    defaulted: tuple = ()
    clock_applied: bool | None = None                # CLOCKAPP, None when absent
    time_pixel_reference: float = 0.5                # TIMEPIXR (memo default 0.5)
    time_bin: float | None = None                    # TIMEDEL in TIMEUNIT, None when absent

    @property
    def reference_frac(self) -> tuple[float, float]:
        """(hi, lo) of MJDREFF + TIMEZERO / 86400, days."""
        return ddmath.dd_add_d(*ddmath.dd_div_d(self.timezero_s, 0.0, SECONDS_PER_DAY),
                               self.mjdref_frac)

    @property
    def time_bin_s(self) -> float | None:
        """TIMEDEL in seconds (None when absent)."""
        return None if self.time_bin is None else self.time_bin * self.unit_s

    @property
    def bin_centre_shift_s(self) -> tuple[float, float]:
        """(hi, lo) of (0.5 - TIMEPIXR) x TIMEDEL x TIMEUNIT in seconds, exact to
        ~1e-32 relative: the shift from the TIME stamp to its bin's centre."""
        if not self.time_bin:
            return 0.0, 0.0
        hi, lo = ddmath.two_sum(0.5, -self.time_pixel_reference)      # exact
        hi, lo = ddmath.dd_mul_d(hi, lo, self.time_bin)
        return tuple(float(x) for x in ddmath.dd_mul_d(hi, lo, self.unit_s))


def _find(name: str, header, primary, hdu: str, path):
    for h in (header, primary):
        if h is not None and name in h:
            return h[name]
    return None


def _number(value, name: str, hdu: str, path) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"keyword {name} in HDU {hdu} must be a number, found "
                         f"{excerpt_value(value)}", path=path, field=name,
                         quoted=(str(value),)) from None
    if not math.isfinite(number):
        raise InputError(f"keyword {name} in HDU {hdu} must be finite, found "
                         f"{excerpt_value(value)}", path=path, field=name, quoted=(str(value),))
    return number


def _text(value) -> str:
    return str(value).strip()


def read_time_keywords(header, hdu: str, path, primary=None) -> TimeKeywords:
    """The timing keywords of ``header`` (falling back to the primary header)."""
    found: dict = {}
    defaulted: list[str] = []

    def get(name):
        value = _find(name, header, primary, hdu, path)
        if value is not None:
            found[name] = value
        return value

    mjdrefi, mjdreff, mjdref = get("MJDREFI"), get("MJDREFF"), get("MJDREF")
    if mjdrefi is not None:
        day = _number(mjdrefi, "MJDREFI", hdu, path)
        if day != round(day):
            raise InputError(f"keyword MJDREFI in HDU {hdu} must be a whole number, found "
                             f"{excerpt_value(mjdrefi)}", path=path, field="MJDREFI",
                             quoted=(str(mjdrefi),))
        if mjdreff is None:
            raise InputError(f"keyword MJDREFF missing in HDU {hdu} (MJDREFI is given; the "
                             "reference MJD is MJDREFI + MJDREFF)", path=path, field="MJDREFF")
        frac = _number(mjdreff, "MJDREFF", hdu, path)
    elif mjdref is not None:
        value = _number(mjdref, "MJDREF", hdu, path)
        day = math.floor(value)
        frac = value - day              # exact (Sterbenz)
    else:
        raise InputError(f"keyword MJDREFI/MJDREFF (or MJDREF) missing in HDU {hdu}: the "
                         "reference MJD of the TIME column", path=path, field="MJDREFI")
    if not 0 <= day < 1e7:
        raise InputError(f"reference MJD {day} in HDU {hdu} is out of range", path=path,
                         field="MJDREFI" if mjdrefi is not None else "MJDREF")
    system = get("TIMESYS")
    if system is None:
        raise InputError(f"keyword TIMESYS missing in HDU {hdu} (the time scale: TT, TDB or "
                         "UTC)", path=path, field="TIMESYS")
    scale = TIME_SYSTEMS.get(_text(system).upper())
    if scale is None:
        raise InputError(f"keyword TIMESYS = {excerpt_value(system)} in HDU {hdu} is not "
                         f"supported; legal: {', '.join(TIME_SYSTEMS)}", path=path,
                         field="TIMESYS", quoted=(str(system),))
    unit_text = get("TIMEUNIT")
    if unit_text is None:
        defaulted.append("TIMEUNIT = 's'")
        unit_s = 1.0
    else:
        unit_s = TIME_UNITS.get(_text(unit_text).lower())
        if unit_s is None:
            raise InputError(f"keyword TIMEUNIT = {excerpt_value(unit_text)} in HDU {hdu} is "
                             "not supported; legal: 's', 'd'", path=path, field="TIMEUNIT",
                             quoted=(str(unit_text),))
    timezero = _timezero(get, hdu, path, defaulted) * unit_s
    pixel, time_bin = _time_bin(get, hdu, path, defaulted)
    ref_text = get("TIMEREF")
    if ref_text is None:
        defaulted.append("TIMEREF = 'LOCAL'")
        timeref = "local"
    else:
        timeref = TIME_REFERENCES.get(_text(ref_text).upper())
        if timeref is None:
            raise InputError(f"keyword TIMEREF = {excerpt_value(ref_text)} in HDU {hdu} is not "
                             "supported; legal: LOCAL, GEOCENTRIC, SOLARSYSTEM", path=path,
                             field="TIMEREF", quoted=(str(ref_text),))
    if timeref == "solarsystem" and scale != "tdb":
        raise InputError(f"TIMEREF = SOLARSYSTEM needs TIMESYS = TDB in HDU {hdu}, found "
                         f"{excerpt_value(system)}", path=path, field="TIMESYS",
                         quoted=(str(system),))
    clock = get("CLOCKAPP")
    return TimeKeywords(hdu=hdu, reference_day=int(day), mjdref_frac=float(frac),
                        timezero_s=float(timezero), unit_s=float(unit_s), scale=scale,
                        timeref=timeref, keywords={k: _plain(v) for k, v in found.items()},
                        defaulted=tuple(defaulted),
                        clock_applied=None if clock is None else bool(clock),
                        time_pixel_reference=pixel, time_bin=time_bin)


def _time_bin(get, hdu: str, path, defaulted: list) -> tuple[float, float | None]:
    """TIMEPIXR (default 0.5) and TIMEDEL (None when absent), checked."""
    pixel_value, width_value = get("TIMEPIXR"), get("TIMEDEL")
    pixel = 0.5
    if pixel_value is not None:
        pixel = _number(pixel_value, "TIMEPIXR", hdu, path)
        if not 0.0 <= pixel <= 1.0:
            raise InputError(f"keyword TIMEPIXR = {excerpt_value(pixel_value)} in HDU {hdu} "
                             "must lie in [0, 1] (where within its time bin TIME lies: 0 the "
                             "start, 0.5 the centre, 1 the end)", path=path, field="TIMEPIXR",
                             quoted=(str(pixel_value),))
    if width_value is None:
        return pixel, None
    width = _number(width_value, "TIMEDEL", hdu, path)
    if width < 0:
        raise InputError(f"keyword TIMEDEL = {excerpt_value(width_value)} in HDU {hdu} must be "
                         ">= 0 (the width of a time bin, in TIMEUNIT)", path=path,
                         field="TIMEDEL", quoted=(str(width_value),))
    if pixel_value is None:
        defaulted.append("TIMEPIXR = 0.5")
    return pixel, width


def _timezero(get, hdu: str, path, defaulted: list) -> float:
    whole, part, single = get("TIMEZERI"), get("TIMEZERF"), get("TIMEZERO")
    if whole is not None or part is not None:
        return (_number(whole or 0.0, "TIMEZERI", hdu, path)
                + _number(part or 0.0, "TIMEZERF", hdu, path))
    if single is None:
        defaulted.append("TIMEZERO = 0")
        return 0.0
    return _number(single, "TIMEZERO", hdu, path)


def _plain(value):
    return value if isinstance(value, (bool, int, float, str)) else str(value)


def time_keyword_cards(reference_day: int, mjdref_frac: float, scale: str, timeref: str,
                       timezero_s: float = 0.0) -> list[tuple]:
    """(keyword, value, comment) cards that ``read_time_keywords`` reads back."""
    system = {"tt": "TT", "tdb": "TDB", "utc": "UTC"}[scale]
    reference = {"local": "LOCAL", "geocentric": "GEOCENTRIC",
                 "solarsystem": "SOLARSYSTEM"}[timeref]
    return [("MJDREFI", int(reference_day), "integer part of the reference MJD"),
            ("MJDREFF", float(mjdref_frac), "fractional part of the reference MJD"),
            ("TIMESYS", system, "time scale of TIME"),
            ("TIMEREF", reference, "where the times are observed"),
            ("TIMEUNIT", "s", "unit of TIME"),
            ("TIMEZERO", float(timezero_s), "offset added to TIME, s")]
