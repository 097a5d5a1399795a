"""Spacecraft orbit tables: time and geocentric position (velocity optional) in
GCRS axes, as plain text or FITS (DESIGN.md §4)::

    # scale: tt
    mjd                      x_m           y_m           z_m          vx_m_per_s  vy_m_per_s  vz_m_per_s
    58849.000000000000000    6878137.0     0.0           0.0          0.0         5101.2      5101.2

Text: ``# scale:`` (tt, utc or tdb) is required; columns ``mjd`` (exact
decimal text), ``x_m``, ``y_m``, ``z_m`` and optionally ``vx_m_per_s``,
``vy_m_per_s``, ``vz_m_per_s`` (all three or none), split on whitespace or
commas. FITS: the HDU named ``ORBIT`` (else the first binary table with X, Y,
Z columns), with ``TIME`` and the OGIP timing keywords (as in an event list),
or an ``MJD`` column and ``TIMESYS``; ``X``, ``Y``, ``Z`` (TUNIT ``m`` or
``km``; metres when absent) and optionally ``VX``, ``VY``, ``VZ`` (``m/s`` or
``km/s``). Times must increase strictly; positions must lie between the
Earth's surface and 0.1 au (kilometres given for metres are caught).
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np

from timingkit.formats.errors import InputError, excerpt, excerpt_value
from timingkit.formats.mjd_text import parse_mjd_column
from timingkit.formats.textfile import is_fits_file, read_text_file
from timingkit.formats.toa_table import SPLIT_RE
from timingkit.numerics.timearray import SplitTime

POSITION_COLUMNS = ("x_m", "y_m", "z_m")
VELOCITY_COLUMNS = ("vx_m_per_s", "vy_m_per_s", "vz_m_per_s")
RADIUS_RANGE_M = (6.2e6, 1.5e10)
SCALES = ("tt", "utc", "tdb")
UNIT_SCALE = {"": 1.0, "m": 1.0, "km": 1000.0, "m/s": 1.0, "km/s": 1000.0, "m s-1": 1.0,
              "km s-1": 1000.0}


@dataclass(eq=False)
class OrbitTable:
    """Rows of an orbit file: ``times`` (SplitTime on ``times.scale``),
    ``position_m`` (N, 3) GCRS metres, ``velocity_m_per_s`` (N, 3) or None;
    ``utc_elapsed_from``: for a FITS TIME column on UTC, MJDREF (day, fraction):
    ``times`` are then MJDREF + elapsed seconds / 86400, carried to TT as event
    times are (timingkit.geometry.utc_seconds)."""
    path: str
    times: SplitTime
    position_m: np.ndarray
    velocity_m_per_s: np.ndarray | None = None
    utc_elapsed_from: tuple[int, float] | None = None

    def __len__(self) -> int:
        return len(self.times)


def _check(path, times: SplitTime, position, velocity, where) -> OrbitTable:
    if len(times) < 4:
        raise InputError(f"an orbit table needs at least 4 rows, found {len(times)}", path=path)
    step = np.diff(times.day) + np.diff(times.frac)
    if np.any(step <= 0):
        row = int(np.flatnonzero(step <= 0)[0]) + 1
        raise InputError("times must increase strictly from row to row", path=path,
                         line=where(row), field="mjd")
    radius = np.linalg.norm(position, axis=1)
    bad = ~((radius > RADIUS_RANGE_M[0]) & (radius < RADIUS_RANGE_M[1]))
    if np.any(bad):
        row = int(np.flatnonzero(bad)[0])
        raise InputError(f"position {radius[row] / 1e3:.1f} km from the geocentre: not a "
                         "spacecraft orbit (positions in metres, geocentric GCRS)", path=path,
                         line=where(row), field="x_m")
    if velocity is not None and not np.all(np.isfinite(velocity)):
        row = int(np.flatnonzero(~np.all(np.isfinite(velocity), axis=1))[0])
        raise InputError("velocity is not finite", path=path, line=where(row),
                         field="vx_m_per_s")
    return OrbitTable(path=path, times=times, position_m=position, velocity_m_per_s=velocity)


def read_orbit_table(path) -> OrbitTable:
    """A text or FITS orbit table (see the module docstring)."""
    path = os.fspath(path)
    if is_fits_file(path, "orbit file"):
        return _read_fits(path)
    return _read_text(path)


def _read_text(path: str) -> OrbitTable:
    text = read_text_file(path, "orbit file")
    scale, header, rows, lines = None, None, [], []
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            key, sep, value = stripped[1:].partition(":")
            if sep and key.strip().lower() == "scale":
                scale = (value.strip().lower(), number)
            continue
        fields = [f for f in SPLIT_RE.split(stripped) if f]
        if header is None:
            header = ([f.lower() for f in fields], number)
            continue
        if len(fields) != len(header[0]):
            raise InputError(f"{len(fields)} fields for {len(header[0])} columns", path=path,
                             line=number)
        rows.append(fields)
        lines.append(number)
    if scale is None:
        raise InputError("the time scale is not stated: add a '# scale: tt' comment (tt, utc "
                         "or tdb)", path=path, field="scale")
    if scale[0] not in SCALES:
        raise InputError(f"unknown time scale {excerpt(scale[0])}; legal: {', '.join(SCALES)}",
                         path=path, line=scale[1], field="scale", quoted=(scale[0],))
    if header is None or not rows:
        raise InputError("no orbit rows (expected a header 'mjd x_m y_m z_m' and rows)",
                         path=path)
    names, header_line = header
    for name in ("mjd", *POSITION_COLUMNS):
        if name not in names:
            raise InputError(f"no '{name}' column; found: {' '.join(names)}", path=path,
                             line=header_line, field=name)
    have_velocity = [n in names for n in VELOCITY_COLUMNS]
    if any(have_velocity) and not all(have_velocity):
        missing = [n for n, h in zip(VELOCITY_COLUMNS, have_velocity) if not h][0]
        raise InputError("give all three velocity columns or none", path=path,
                         line=header_line, field=missing)
    columns = list(zip(*rows))

    def numbers(name):
        out = np.empty(len(rows))
        for i, value in enumerate(columns[names.index(name)]):
            try:
                out[i] = float(value)
            except ValueError:
                raise InputError(f"expected a number, found {excerpt(value)}", path=path,
                                 line=lines[i], field=name, quoted=(value,)) from None
            if not np.isfinite(out[i]):
                raise InputError(f"expected a finite number, found {excerpt(value)}", path=path,
                                 line=lines[i], field=name, quoted=(value,))
        return out

    day, frac = parse_mjd_column(columns[names.index("mjd")], path, lines)
    position = np.column_stack([numbers(n) for n in POSITION_COLUMNS])
    velocity = np.column_stack([numbers(n) for n in VELOCITY_COLUMNS]) if all(have_velocity) \
        else None
    return _check(path, SplitTime(day, frac, scale[0]), position, velocity,
                  lambda row: lines[row])


def _read_fits(path: str) -> OrbitTable:
    from astropy.io import fits

    from timingkit.formats.event_list import split_time_from_seconds
    from timingkit.formats.ogip_time import TIME_SYSTEMS, read_time_keywords
    try:
        hdul = fits.open(path, memmap=True, mode="readonly")
    except (OSError, ValueError) as exc:
        raise InputError(f"not a readable FITS file ({exc})", path=path) from None
    with hdul:
        tables = [i for i, h in enumerate(hdul) if isinstance(h, fits.BinTableHDU)]
        named = [i for i in tables if hdul[i].name.upper() == "ORBIT"]
        with_xyz = [i for i in tables if {"X", "Y", "Z"} <= {c.upper() for c in
                                                            hdul[i].columns.names}]
        if not (named or with_xyz):
            raise InputError("no orbit table: expected a binary table named ORBIT with X, Y, Z "
                             "columns", path=path, field="ORBIT")
        index = (named or with_xyz)[0]
        hdu = hdul[index]
        label = f"{hdu.name} (HDU {index})" if hdu.name else f"HDU {index}"
        lookup = {c.upper(): c for c in hdu.columns.names}
        utc_elapsed_from = None

        def column(name, units="m"):
            if name not in lookup:
                raise InputError(f"no {name} column in {label}", path=path, field=name)
            col = hdu.columns[lookup[name]]
            unit = (col.unit or "").strip().lower()
            if unit not in UNIT_SCALE:
                raise InputError(f"unit {excerpt_value(col.unit)} of column {name} in {label} "
                                 f"is not supported; use {units} or k{units}", path=path,
                                 field=name, quoted=(str(col.unit),))
            return np.asarray(hdu.data.field(lookup[name]), dtype=float) * UNIT_SCALE[unit]

        if "TIME" in lookup:
            keys = read_time_keywords(hdu.header, label, path, primary=hdul[0].header)
            seconds = np.asarray(hdu.data.field(lookup["TIME"]), dtype=float) * keys.unit_s
            times = split_time_from_seconds(keys.reference_day, keys.reference_frac, seconds,
                                            None, keys.scale)
            if keys.scale == "utc":
                utc_elapsed_from = (keys.reference_day, keys.mjdref_frac)
        elif "MJD" in lookup:
            system = hdu.header.get("TIMESYS", hdul[0].header.get("TIMESYS"))
            if system is None or str(system).strip().upper() not in TIME_SYSTEMS:
                raise InputError(f"keyword TIMESYS missing or not TT/TDB/UTC in {label}",
                                 path=path, field="TIMESYS")
            mjd = np.asarray(hdu.data.field(lookup["MJD"]), dtype=float)
            day = np.floor(mjd)
            times = SplitTime(day, mjd - day, TIME_SYSTEMS[str(system).strip().upper()])
        else:
            raise InputError(f"no TIME or MJD column in {label}", path=path, field="TIME")
        position = np.column_stack([column(n) for n in ("X", "Y", "Z")])
        velocity = None
        if any(n in lookup for n in ("VX", "VY", "VZ")):
            velocity = np.column_stack([column(n, "m/s") for n in ("VX", "VY", "VZ")])
    table = _check(path, times, position, velocity, lambda row: row + 1)
    table.utc_elapsed_from = utc_elapsed_from
    return table


def write_orbit_text(path, times: SplitTime, position_m, velocity_m_per_s=None) -> None:
    """Write an orbit table in the text form (for simulations and tests)."""
    from timingkit.formats.model_file import atomic_write_text
    names = ["mjd", *POSITION_COLUMNS] + (list(VELOCITY_COLUMNS) if velocity_m_per_s is not None
                                          else [])
    lines = [f"# scale: {times.scale}", " ".join(names)]
    values = np.asarray(position_m, dtype=float)
    if velocity_m_per_s is not None:
        values = np.column_stack([values, np.asarray(velocity_m_per_s, dtype=float)])
    for text, row in zip(times.mjd_strings(15), values.tolist()):
        lines.append(text + " " + " ".join(f"{v:.6f}" for v in row))
    atomic_write_text(os.fspath(path), "\n".join(lines) + "\n")
