"""Plain-text event lists, for events that do not come as OGIP FITS::

    # scale: tt            (utc, tt or tdb)
    # site: geocentre      (a site name from the site files, geocentre or ssb)
    mjd                      energy_kev
    58849.123456789012345    2.31

Lines starting with ``#`` are comments; ``# scale:`` and ``# site:`` comments
state the time scale and the observer (the command line's ``--scale`` and
``--site`` replace them; the site decides where the times are observed:
``geocentre`` and ``ssb`` included). The first other line names the columns (split on
whitespace or commas); ``mjd`` is required and read exactly (decimal text,
up to 20 significant digits, as in the TOA table); every other column is
kept, as numbers when all its values are numbers and as text otherwise.
"""

from __future__ import annotations

import re

import numpy as np

from timingkit.formats.errors import InputError, excerpt
from timingkit.formats.event_list import EventList, pick_energy_column
from timingkit.formats.mjd_text import parse_mjd_column
from timingkit.formats.textfile import read_text_file
from timingkit.formats.toa_table import SPLIT_RE
from timingkit.numerics import ddmath
from timingkit.numerics.timearray import SECONDS_PER_DAY

SCALES = ("utc", "tt", "tdb")
HEADER_RE = re.compile(r"^#\s*(scale|site)\s*:\s*(\S+)\s*$", re.IGNORECASE)


def read_text_events(path: str, scale: str | None = None, site: str | None = None) -> EventList:
    """A plain-text event list (see the module docstring)."""
    text = read_text_file(path, "event list")
    stated: dict[str, tuple[str, int]] = {}
    header = None
    rows: list[list[str]] = []
    lines: list[int] = []
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            match = HEADER_RE.match(stripped)
            if match:
                stated[match.group(1).lower()] = (match.group(2), number)
            continue
        fields = [f for f in SPLIT_RE.split(stripped) if f]
        if header is None:
            header = (fields, number)
            continue
        if len(fields) != len(header[0]):
            raise InputError(f"{len(fields)} fields for {len(header[0])} columns "
                             f"({' '.join(header[0])})", path=path, line=number)
        rows.append(fields)
        lines.append(number)
    if header is None:
        raise InputError("no column header line (expected e.g. 'mjd energy_kev')", path=path)
    names = [n.lower() for n in header[0]]
    if "mjd" not in names:
        raise InputError(f"no 'mjd' column; found: {' '.join(header[0])}", path=path,
                         line=header[1], field="mjd")
    if len(set(names)) != len(names):
        raise InputError("a column name appears twice", path=path, line=header[1])
    if not rows:
        raise InputError("no events in the list", path=path)
    scale = _scale(scale, stated, path)
    site_name = site if site is not None else stated.get("site", (None, 0))[0]
    values = list(zip(*rows))
    columns = {}
    mjd_text = np.array(values[names.index("mjd")])
    for name, column in zip(header[0], values):
        columns[name] = mjd_text if name.lower() == "mjd" else _column(column)
    day, frac = parse_mjd_column(mjd_text, path, lines)
    reference_day = int(day.min())
    p_hi, p_lo = ddmath.two_prod(frac, SECONDS_PER_DAY)             # exact
    hi, lo = ddmath.dd_add_d(p_hi, p_lo, (day - reference_day) * SECONDS_PER_DAY)
    energy = pick_energy_column([n for n in header[0] if n.lower() != "mjd"], None, path)
    events = EventList(path=path, kind="text", reference_day=reference_day,
                       reference_frac=(0.0, 0.0), seconds=hi, seconds_lo=lo, scale=scale,
                       timeref="local", mjdref=(reference_day, 0.0), columns=columns,
                       site=site_name, energy_column=energy)
    events.keywords = {"scale": scale, "site": site_name}
    return events


def _scale(given, stated, path) -> str:
    if given is None and "scale" not in stated:
        raise InputError("the time scale is not stated: add a '# scale: tt' (utc, tt or tdb) "
                         "comment or give --scale", path=path, field="scale")
    value, line = (given, None) if given is not None else stated["scale"]
    if value.lower() not in SCALES:
        raise InputError(f"unknown time scale {excerpt(value)}; legal: {', '.join(SCALES)}",
                         path=path, line=line, field="scale", quoted=(value,))
    return value.lower()


def _column(values) -> np.ndarray:
    try:
        return np.array([float(v) for v in values])
    except ValueError:
        return np.array(values)
