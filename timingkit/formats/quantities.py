"""Numbers a Python caller may give with astropy units or as an astropy ``Time``.

A name with a unit in it (``err_us``, ``freq_mhz``) promises that unit: plain
numbers are taken to be in it, an astropy ``Quantity`` is converted to it, and
anything that cannot be converted is refused with a clear message. Units are
never stripped silently (``np.asarray(1500 * u.ns)`` would give 1500).
astropy is imported only when a caller actually passes one of its objects.
"""

from __future__ import annotations

import numpy as np

from timingkit.formats.errors import InputError

UNIT_WORDS = {"us": "a time (e.g. astropy.units.ns, us, ms)",
              "MHz": "a frequency or wavelength (e.g. astropy.units.MHz, GHz, cm)"}

# Time scales an MJD of the TOA table is in, by the site it was observed at
# (TOA table rules), and the astropy scales that convert to it exactly there.
_GEOCENTRE_NAMES = ("geocentre",)
_BARYCENTRE_NAMES = ("ssb", "barycentre")
_EXACT_AT = {"utc": ("utc", "tt", "tai"),
             "tt": ("utc", "tt", "tai", "tdb", "tcg", "tcb"),
             "tdb": ("tdb", "tcb")}


def is_quantity(value) -> bool:
    return hasattr(value, "unit") and hasattr(value, "to_value")


def is_time(value) -> bool:
    return hasattr(value, "jd1") and hasattr(value, "jd2") and hasattr(value, "scale")


def in_unit(value, unit: str, field: str):
    """``value`` in ``unit`` ("us" or "MHz"): plain numbers unchanged, an astropy
    Quantity (or a list of them) converted; frequencies also from wavelengths."""
    if isinstance(value, (list, tuple)) and any(is_quantity(v) for v in value):
        return np.array([float(in_unit(v, unit, field)) for v in value])
    if is_time(value):
        raise InputError(f"expected {UNIT_WORDS[unit]}, found an astropy Time", field=field)
    if not is_quantity(value):
        return value
    import astropy.units as u
    try:
        return np.asarray(value.to_value(u.Unit(unit), equivalencies=u.spectral()),
                          dtype=np.float64)
    except u.UnitConversionError:
        unit_text = value.unit.to_string() or "dimensionless"
        raise InputError(f"expected {UNIT_WORDS[unit]}, found a quantity in '{unit_text}'",
                         field=field) from None


def table_scale(site: str) -> str:
    """The time scale of a TOA-table MJD at ``site``: TT at the geocentre, TDB at
    the barycentre, UTC elsewhere."""
    if site in _GEOCENTRE_NAMES:
        return "tt"
    return "tdb" if site in _BARYCENTRE_NAMES else "utc"


def time_to_mjd_parts(time, sites) -> tuple[np.ndarray, np.ndarray]:
    """(whole MJD day, fraction) of an astropy ``Time`` in each row's table scale
    (:func:`table_scale`), from its two-part Julian date without loss (< 10 ps).
    Conversions astropy does exactly are made; one that needs the site's position
    (TDB at a ground site) or Earth-rotation tables (UT1) is refused."""
    n = len(sites)
    if time.isscalar:
        time = time.reshape((1,))
    if time.ndim != 1 or len(time) not in (1, n):
        raise InputError(f"{len(time)} times for {n} TOAs", field="mjd")
    day, frac = np.empty(n), np.empty(n)
    scales = np.array([table_scale(str(s)) for s in sites])
    for scale in np.unique(scales):
        rows = np.flatnonzero(scales == scale)
        if time.scale not in _EXACT_AT[scale]:
            where = {"utc": "a ground site", "tt": "the geocentre", "tdb": "the barycentre"}
            raise InputError(f"TOAs at {where[scale]} are MJDs in {scale.upper()}; a time in "
                             f"{time.scale.upper()} cannot be converted to it exactly there: "
                             f"give the times in {' or '.join(s.upper() for s in _EXACT_AT[scale])}",
                             field="mjd")
        part = time if len(time) == 1 else time[rows]
        converted = getattr(part, scale)
        jd1 = np.broadcast_to(np.asarray(converted.jd1, dtype=np.float64), (len(rows),))
        jd2 = np.broadcast_to(np.asarray(converted.jd2, dtype=np.float64), (len(rows),))
        # MJD = (jd1 - 2400001) + (jd2 + 0.5): astropy keeps jd1 whole and |jd2| <= 0.5
        whole = np.round(jd1) - 2400001.0
        rest = (jd1 - np.round(jd1)) + jd2 + 0.5
        shift = np.floor(rest)
        day[rows], frac[rows] = whole + shift, rest - shift
    return day, frac
