"""Observing sites as records, and the site file that lists them (TOML)::

    [site.desert-dish]
    geocentric_itrf_m = [-2271954.4, -4399946.5, 4008782.2]  # or longitude_deg, latitude_deg, height_m
    other_names = ["dd"]
    coordinates_from = "survey of 2019, +-0.1 m"        # optional: where the numbers come from

Built in: ``geocentre`` (the ITRF origin; TOAs there are in TT) and ``ssb`` (the
solar-system barycentre, also ``barycentre``; TOAs there are in TDB). Geodetic
coordinates are WGS84 (erfa.gd2gc).
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass

import erfa
import numpy as np

from timingkit.formats.errors import InputError, excerpt
from timingkit.formats.textfile import parse_toml, read_text_file, top_level_table

SITE_KINDS = ("earth", "geocentre", "ssb")


WGS84 = 1  # erfa ellipsoid identifier


_NAME = re.compile(r"^[a-z0-9][a-z0-9_.+-]*$")


_SITE_KEYS = ("geocentric_itrf_m", "longitude_deg", "latitude_deg", "height_m", "other_names", "coordinates_from")


_GEODETIC_KEYS = ("longitude_deg", "latitude_deg", "height_m")


# Plausible geocentric distance of a place on (or just above) the Earth:
# catches kilometres given for metres and swapped or missing digits.
_ITRF_RADIUS_RANGE_M = (6.2e6, 6.5e6)


_HEIGHT_RANGE_M = (-1.0e4, 1.0e5)


@dataclass(frozen=True)
class Site:
    """One observing site.

    ``geocentric_itrf_m``: ITRF geocentric x, y, z in metres (zeros for the
    geocentre, None for the ssb). ``coordinates_from`` says where the coordinates come
    from and how accurate they are. ``clock_advice``: what to do when no clock
    table applies (empty: supply one in settings.clock).
    """
    name: str
    kind: str
    geocentric_itrf_m: np.ndarray | None
    other_names: tuple[str, ...] = ()
    coordinates_from: str = ""
    clock_advice: str = ""

    def __post_init__(self):
        if self.kind not in SITE_KINDS:
            raise ValueError(f"site kind must be one of {', '.join(SITE_KINDS)}, not {self.kind!r}")
        object.__setattr__(self, "name", self.name.lower())
        object.__setattr__(self, "other_names", tuple(a.lower() for a in self.other_names))
        if self.kind == "ssb":
            if self.geocentric_itrf_m is not None:
                raise ValueError("the ssb has no ITRF position")
            return
        if self.kind == "earth" and self.geocentric_itrf_m is None:
            raise ValueError(f"site {self.name}: an Earth site needs geocentric_itrf_m")
        xyz = np.array(self.geocentric_itrf_m if self.geocentric_itrf_m is not None else np.zeros(3), dtype=float)
        if xyz.shape != (3,) or not np.all(np.isfinite(xyz)):
            raise ValueError(f"site {self.name}: geocentric_itrf_m must be 3 finite numbers")
        if self.kind == "geocentre" and np.any(xyz != 0.0):
            raise ValueError("the geocentre is the ITRF origin")
        xyz.setflags(write=False)
        object.__setattr__(self, "geocentric_itrf_m", xyz)

    # Equality and hashing by value (the generated ones choke on the array).
    def _key(self):
        xyz = None if self.geocentric_itrf_m is None else tuple(self.geocentric_itrf_m.tolist())
        return (self.name, self.kind, xyz, self.other_names, self.coordinates_from)

    def __eq__(self, other):
        return isinstance(other, Site) and self._key() == other._key()

    def __hash__(self):
        return hash(self._key())

    def _geodetic(self):
        if self.kind == "ssb":
            raise ValueError("the ssb is not on the Earth: it has no geodetic coordinates")
        if self.kind == "geocentre":
            return 0.0, math.nan, math.nan
        elong, phi, height = erfa.gc2gd(WGS84, self.geocentric_itrf_m)
        return float(elong), float(phi), float(height)

    @property
    def longitude_rad(self) -> float:
        """WGS84 longitude, east positive (0 for the geocentre: there the
        topocentric TDB terms vanish whatever the longitude)."""
        return self._geodetic()[0]

    @property
    def latitude_rad(self) -> float:
        """WGS84 geodetic latitude (nan for the geocentre)."""
        return self._geodetic()[1]

    @property
    def height_m(self) -> float:
        """Height above the WGS84 ellipsoid (nan for the geocentre)."""
        return self._geodetic()[2]

    @property
    def spin_axis_distance_km(self) -> float:
        """Distance from the Earth's spin axis (``u`` of erfa.dtdb), km.

        Taken from the ITRF z axis; the true axis differs by the polar motion
        (< 1", < 30 m), far below what the TDB topocentric terms can feel.
        """
        if self.kind == "ssb":
            raise ValueError("the ssb is not on the Earth")
        x, y, _ = self.geocentric_itrf_m
        return math.hypot(x, y) / 1000.0

    @property
    def equator_distance_km(self) -> float:
        """Distance north of the equatorial plane (``v`` of erfa.dtdb), km."""
        if self.kind == "ssb":
            raise ValueError("the ssb is not on the Earth")
        return float(self.geocentric_itrf_m[2]) / 1000.0


GEOCENTRE = Site("geocentre", "geocentre", np.zeros(3), (),
                 "definition: the ITRF origin, the Earth's centre of mass (exact); "
                 "TOAs at this site are in TT")


SSB = Site("ssb", "ssb", None, ("barycentre",),
           "definition: the solar-system barycentre; TOAs at this site are in TDB "
           "and already barycentric")


BUILTIN_SITES = (GEOCENTRE, SSB)


def _header_line(lines: list[str], name: str) -> int | None:
    pattern = re.compile(r"^\s*\[\s*site\s*\.\s*[\"']?" + re.escape(name) + r"[\"']?\s*\]")
    for n, text in enumerate(lines, 1):
        if pattern.match(text):
            return n
    return None


def _number(value, path, line, fieldname, what):
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{what} must be a number, got {excerpt(value)}", path=path, line=line,
                         field=fieldname, quoted=(value,))
    value = float(value)
    if not math.isfinite(value):
        raise InputError(f"{what} must be finite, got {value!r}", path=path, line=line,
                         field=fieldname)
    return value


def _check_name(name, path, line, fieldname, what):
    if not isinstance(name, str) or not _NAME.match(name.lower()):
        raise InputError(f"{what} {excerpt(name)} is not a plain site name: use lowercase "
                         "letters, digits and - _ . + (starting with a letter or digit)",
                         path=path, line=line, field=fieldname, quoted=(name,))
    return name.lower()


def _site_from_entry(name: str, entry, path: str, line: int | None) -> Site:
    where = f"site.{name}"
    if not isinstance(entry, dict):
        raise InputError(f"[{where}] must be a table of keys, got {excerpt(entry)}", path=path,
                         line=line, field=where, quoted=(entry,))
    unknown = [k for k in entry if k not in _SITE_KEYS]
    if unknown:
        raise InputError(f"unknown key {excerpt(unknown[0])} in [{where}]; allowed keys: "
                         + ", ".join(_SITE_KEYS), path=path, line=line,
                         field=f"{where}.{unknown[0]}", quoted=(unknown[0],))
    has_xyz = "geocentric_itrf_m" in entry
    geo_given = [k for k in _GEODETIC_KEYS if k in entry]
    if has_xyz and geo_given:
        raise InputError(f"[{where}] gives both geocentric_itrf_m and {geo_given[0]}: give either "
                         "geocentric_itrf_m or longitude_deg/latitude_deg/height_m",
                         path=path, line=line, field=f"{where}.{geo_given[0]}")
    if not has_xyz and not geo_given:
        raise InputError(f"[{where}] has no coordinates: give geocentric_itrf_m = [x, y, z] (metres) "
                         "or longitude_deg, latitude_deg and height_m (WGS84)",
                         path=path, line=line, field=where)
    if has_xyz:
        key = f"{where}.geocentric_itrf_m"
        raw = entry["geocentric_itrf_m"]
        if not isinstance(raw, list) or len(raw) != 3:
            raise InputError(f"geocentric_itrf_m must be a list of 3 numbers [x, y, z] in metres, "
                             f"got {excerpt(raw)}", path=path, line=line, field=key,
                             quoted=(raw,))
        xyz = np.array([_number(v, path, line, key, "each geocentric_itrf_m component") for v in raw])
        radius = float(np.linalg.norm(xyz))
        lo, hi = _ITRF_RADIUS_RANGE_M
        if not lo <= radius <= hi:
            raise InputError(f"geocentric_itrf_m is {radius:.6g} m from the Earth's centre; a site "
                             f"on the Earth is {lo:.3g} to {hi:.3g} m away (metres expected, "
                             "not kilometres)", path=path, line=line, field=key)
        describe = "ITRF x, y, z"
    else:
        missing = [k for k in _GEODETIC_KEYS if k not in entry]
        if missing:
            raise InputError(f"[{where}] lacks {missing[0]}: geodetic coordinates need all of "
                             "longitude_deg, latitude_deg, height_m", path=path, line=line,
                             field=f"{where}.{missing[0]}")
        lon = _number(entry["longitude_deg"], path, line, f"{where}.longitude_deg", "longitude_deg")
        lat = _number(entry["latitude_deg"], path, line, f"{where}.latitude_deg", "latitude_deg")
        height = _number(entry["height_m"], path, line, f"{where}.height_m", "height_m")
        if not -360.0 <= lon <= 360.0:
            raise InputError(f"longitude_deg {lon} is outside -360..360", path=path, line=line,
                             field=f"{where}.longitude_deg")
        if not -90.0 <= lat <= 90.0:
            raise InputError(f"latitude_deg {lat} is outside -90..90", path=path, line=line,
                             field=f"{where}.latitude_deg")
        if not _HEIGHT_RANGE_M[0] <= height <= _HEIGHT_RANGE_M[1]:
            raise InputError(f"height_m {height} is outside {_HEIGHT_RANGE_M[0]:g}.."
                             f"{_HEIGHT_RANGE_M[1]:g} m (metres above the WGS84 ellipsoid)",
                             path=path, line=line, field=f"{where}.height_m")
        xyz = erfa.gd2gc(WGS84, math.radians(lon), math.radians(lat), height)
        describe = "WGS84 longitude, latitude, height"
    other_names = entry.get("other_names", [])
    if not isinstance(other_names, list):
        raise InputError(f"other_names must be a list of names, got {excerpt(other_names)}",
                         path=path, line=line, field=f"{where}.other_names",
                         quoted=(other_names,))
    other_names = tuple(_check_name(a, path, line, f"{where}.other_names", "other name")
                        for a in other_names)
    source = entry.get("coordinates_from")
    if source is None:
        source = f"site file {path} ({describe}; accuracy not stated in the file)"
    elif not isinstance(source, str):
        raise InputError(f"coordinates_from must be text, got {excerpt(source)}", path=path,
                         line=line, field=f"{where}.coordinates_from", quoted=(source,))
    else:
        source = f"site file {path}: {source}"
    return Site(name, "earth", xyz, other_names, source)


def load_site_file(path) -> list[Site]:
    """Read a TOML site file; every problem is an InputError naming the file,
    the line of the site's header where it can be found, and the key."""
    path = os.fspath(path)
    text = read_text_file(path, "site file")
    data = parse_toml(text, path)
    entries = top_level_table(data, "site", ("site",), path,
                              "[site.NAME] tables only", default={})
    if not isinstance(entries, dict):
        raise InputError("'site' must be a table of [site.NAME] tables", path=path, field="site")
    lines = text.splitlines()
    sites, seen = [], {}
    for raw_name, entry in entries.items():
        line = _header_line(lines, raw_name)
        name = _check_name(raw_name, path, line, f"site.{raw_name}", "site name")
        site = _site_from_entry(name, entry, path, line)
        for label in (site.name, *site.other_names):
            if label in seen:
                raise InputError(f"name '{label}' of site {site.name} is already used by site "
                                 f"{seen[label]} in this file", path=path, line=line,
                                 field=f"site.{raw_name}")
            seen[label] = site.name
        sites.append(site)
    return sites
