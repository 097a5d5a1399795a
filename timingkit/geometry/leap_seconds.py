"""The bundled leap-second table, read without importing astropy.time.

UTC -> TAI needs TAI - UTC (IERS Bulletin C). ERFA carries its own copy of the
table; astropy, when it first converts a UTC time, brings ERFA's copy up to
date from the ``astropy-iers-data`` package's ``Leap_Second.dat`` and sets its
expiry. We do the same here, from the same installed file and never from the
network, so UTC -> TT is ERFA's ``utctai`` + ``taitt`` with exactly the table
astropy would use, without the ~0.3 s it costs to import astropy.time and
astropy.utils.iers (the barycentring command's start-up; issue 14).
"""

from __future__ import annotations

import datetime
import functools
import re
import warnings

import erfa
import numpy as np

_EXPIRES = re.compile(r"File expires on\s+(\d{1,2})\s+(\w+)\s+(\d{4})")
_MONTHS = {name: k for k, name in enumerate(
    ("january", "february", "march", "april", "may", "june", "july", "august", "september",
     "october", "november", "december"), start=1)}
MJD_OF_UNIX_EPOCH = 40587.0


@functools.lru_cache(maxsize=1)
def bundled_table() -> tuple[np.ndarray, datetime.datetime | None]:
    """(rows with year, month, tai_utc; expiry) of astropy-iers-data's Leap_Second.dat."""
    from astropy_iers_data import IERS_LEAP_SECOND_FILE
    with open(IERS_LEAP_SECOND_FILE, encoding="ascii", errors="replace") as fh:
        text = fh.read()
    rows = []
    for line in text.splitlines():
        parts = line.split()
        if line.lstrip().startswith("#") or len(parts) != 5:
            continue
        _, day, month, year, tai_utc = parts
        if day == "1":
            rows.append((int(year), int(month), float(tai_utc)))
    table = np.array(rows, dtype=[("year", "i4"), ("month", "i4"), ("tai_utc", "f8")])
    found = _EXPIRES.search(text)
    expires = None
    if found and found.group(2).lower() in _MONTHS:
        expires = datetime.datetime(int(found.group(3)), _MONTHS[found.group(2).lower()],
                                    int(found.group(1)))
    return table, expires


@functools.lru_cache(maxsize=1)
def install() -> float:
    """Bring ERFA's leap-second table up to date from the bundled file (once);
    returns the MJD at which the table expires (nan when unknown)."""
    table, expires = bundled_table()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        erfa.leap_seconds.update(table)
        if expires is not None and expires > erfa.leap_seconds.expires:
            erfa.leap_seconds.expires = expires
    end = erfa.leap_seconds.expires
    return MJD_OF_UNIX_EPOCH + (end - datetime.datetime(1970, 1, 1)).total_seconds() / 86400.0
