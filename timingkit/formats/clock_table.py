"""Observatory clock-correction tables.

Format (the project's own, DESIGN.md §4): a plain-text table with two
columns ``mjd`` and ``offset_us``, and header comments naming what it
converts between and which site(s) it applies to::

    # converts: desert-dish maser -> UTC
    # site: desert-dish
    mjd        offset_us
    58000.0    0.512
    58100.0    0.530

The offset is added to the site clock reading: ``UTC = site clock + offset``.
Values are linearly interpolated; outside the table the end value is held and
a warning is raised into the report (clock offsets drift slowly, but the
result is then only as good as that assumption).
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.textfile import read_text_file


@dataclass
class ClockTable:
    path: str
    sites: tuple[str, ...]          # lower-case names; ('*',) = every Earth site
    converts: str                   # e.g. "desert-dish maser -> UTC"
    mjd: np.ndarray
    offset_us: np.ndarray
    warnings: list[str] = field(default_factory=list)
    site_line: int | None = None    # line of the '# site:' comment

    def applies_to(self, site_name: str) -> bool:
        return "*" in self.sites or site_name.lower() in self.sites

    def offset_s(self, mjd: np.ndarray, site_name: str = "") -> tuple[np.ndarray, list[str]]:
        """Interpolated offset in seconds and warnings for times outside the table."""
        out = np.interp(mjd, self.mjd, self.offset_us) * 1e-6
        warn = []
        outside = (mjd < self.mjd[0]) | (mjd > self.mjd[-1])
        if np.any(outside):
            warn.append(
                f"clock table {os.path.basename(self.path)} ({self.converts}) covers MJD "
                f"{self.mjd[0]:.1f}-{self.mjd[-1]:.1f}; {int(outside.sum())} TOA(s) of site "
                f"'{site_name}' lie outside it and use the end value held constant")
        return out, warn


def read_clock_table(path: str) -> ClockTable:
    """Read and validate a clock table; errors name the file, line and field."""
    text = read_text_file(path, "clock-correction table")
    sites: tuple[str, ...] = ()
    site_line = None
    converts = ""
    header = None
    mjds, offs = [], []
    for lineno, line in enumerate(text.splitlines(), 1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            body = stripped.lstrip("#").strip()
            key, _, value = body.partition(":")
            if key.strip().lower() == "converts":
                converts = value.strip()
            elif key.strip().lower() == "site":
                sites = tuple(s.strip().lower() for s in value.replace(",", " ").split() if s.strip())
                site_line = lineno
            continue
        parts = stripped.replace(",", " ").split()
        if header is None:
            header = parts
            if sorted(header) != ["mjd", "offset_us"]:
                raise InputError("columns must be 'mjd' and 'offset_us'; found", path=path,
                                 line=lineno, excerpt=" ".join(parts))
            continue
        if len(parts) != 2:
            raise InputError(f"expected 2 fields, found {len(parts)}", path=path, line=lineno)
        row = dict(zip(header, parts))
        for name in ("mjd", "offset_us"):
            try:
                value = float(row[name])
            except ValueError:
                raise InputError("not a number", path=path, line=lineno, field=name,
                                 excerpt=row[name]) from None
            if not np.isfinite(value):
                raise InputError("must be finite", path=path, line=lineno, field=name)
        mjds.append(float(row["mjd"]))
        offs.append(float(row["offset_us"]))
        if len(mjds) > 1 and mjds[-1] <= mjds[-2]:
            raise InputError("MJDs must increase", path=path, line=lineno, field="mjd")
    if not converts:
        raise InputError("missing header comment '# converts: <clock> -> <scale>'", path=path)
    if not sites:
        raise InputError("missing header comment '# site: <name>' (or '*' for all sites)", path=path)
    if not mjds:
        raise InputError("no rows in clock table", path=path)
    return ClockTable(path=str(path), sites=sites, converts=converts,
                      mjd=np.array(mjds), offset_us=np.array(offs), site_line=site_line)
