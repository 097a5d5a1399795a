"""Solar-system ephemeris: barycentric positions and velocities from a JPL SPK file.

The built-in file is DE421 (JPL, Folkner et al. 2008), shipped by the
``skyfield-data`` package; a user's own ``.bsp`` (DE440, DE441 ...) is
accepted by path. Read with ``jplephem.spk``, passing whole and fractional
TDB Julian dates separately so no precision is lost (jplephem evaluates the
Chebyshev series on the two parts). Positions in metres, velocities in m/s,
in the ICRF axes, relative to the solar-system barycentre.
"""

from __future__ import annotations

import os
from functools import lru_cache

import numpy as np
from jplephem.spk import SPK

from timingkit.formats.errors import InputError
from timingkit.formats.safe_read import check_regular_file
from timingkit.numerics.chebyshev_grid import chebyshev_sum
from timingkit.numerics.timearray import SplitTime

KM = 1000.0
SECONDS_PER_DAY = 86400.0

# NAIF integer codes (public NAIF convention).
BODY_CODES = {
    "mercury": 1, "venus": 2, "earth-moon-barycentre": 3, "mars": 4,
    "jupiter": 5, "saturn": 6, "uranus": 7, "neptune": 8, "pluto": 9,
    "sun": 10, "moon": 301, "earth": 399,
}

BUILTIN_NAME = "builtin"
MAX_LINES_NAMED = 5          # lines of the TOA table named in a message


def builtin_ephemeris_path() -> str:
    """Path of DE421 inside the skyfield-data package."""
    import skyfield_data

    return os.path.join(os.path.dirname(skyfield_data.__file__), "data", "de421.bsp")


class Ephemeris:
    """An open SPK file. Use :func:`load_ephemeris` (cached per process)."""

    def __init__(self, path: str, label: str):
        self.path = path
        self.label = label
        check_regular_file(path, "JPL SPK ephemeris (.bsp)")   # never a device or FIFO
        try:
            self._kernel = SPK.open(path)
        except FileNotFoundError:
            raise InputError("ephemeris file not found", path=path) from None
        except Exception as exc:  # jplephem raises assorted errors on non-SPK files
            raise InputError("not a readable JPL SPK ephemeris", path=path,
                             excerpt=str(exc)) from None
        self._segments = {(s.center, s.target): s for s in self._kernel.segments}
        self._arrays: dict = {}
        starts = [s.start_jd for s in self._kernel.segments]
        ends = [s.end_jd for s in self._kernel.segments]
        self.start_jd = max(starts)
        self.end_jd = min(ends)

    def __repr__(self) -> str:
        return f"Ephemeris({self.label!r})"

    def _chain(self, code: int) -> list[tuple[int, int]]:
        """Segments from the barycentre (0) to ``code``."""
        if (0, code) in self._segments:
            return [(0, code)]
        for (center, target) in self._segments:
            if target == code and center != 0:
                return self._chain(center) + [(center, target)]
        raise InputError(f"ephemeris has no data for NAIF body {code}", path=self.path)

    def has_body(self, body: str) -> bool:
        """Whether the file holds ``body`` (a name of BODY_CODES)."""
        try:
            self._chain(BODY_CODES[body])
        except (KeyError, InputError):
            return False
        return True

    def check_span(self, tdb: SplitTime, where: str | None = None, line_numbers=None) -> None:
        """InputError unless every time lies inside the file's span; it names
        the first offending lines of the TOA table when ``line_numbers`` (one
        per time) are given."""
        jd = tdb.jd1 + tdb.jd2
        bad = (jd < self.start_jd) | (jd > self.end_jd)
        if np.any(bad):
            rows = np.flatnonzero(bad)
            first = int(rows[0])
            lo = self.start_jd - 2400000.5
            hi = self.end_jd - 2400000.5
            line = None
            lines_text = ""
            if line_numbers is not None:
                line = int(line_numbers[first])
                shown = ", ".join(str(int(line_numbers[r])) for r in rows[:MAX_LINES_NAMED])
                more = " ..." if len(rows) > MAX_LINES_NAMED else ""
                lines_text = f"; lines {shown}{more}"
            raise InputError(
                f"{len(rows)} TOA(s) lie outside the ephemeris span "
                f"MJD {lo:.1f}-{hi:.1f} of {self.label} (first: MJD {tdb.mjd[first]:.6f}"
                f"{lines_text}); use an ephemeris covering the data (settings.ephemeris in the "
                "model, or the ephemeris option)", path=where, line=line, field="mjd" if line else None)

    def posvel(self, body: str, tdb: SplitTime) -> tuple[np.ndarray, np.ndarray]:
        """Barycentric position (m) and velocity (m/s) of ``body``, shape (N, 3)."""
        return self.posvel_jd(body, tdb.jd1, tdb.jd2)

    def posvel_jd(self, body: str, jd1: np.ndarray, jd2: np.ndarray,
                  velocity: bool = True) -> tuple[np.ndarray, np.ndarray | None]:
        """As :meth:`posvel` for TDB Julian dates given in two parts; without
        ``velocity`` only the position is computed (velocity None)."""
        jd1, jd2 = np.atleast_1d(np.asarray(jd1, dtype=float)), np.atleast_1d(np.asarray(jd2, dtype=float))
        pos = np.zeros((3, len(jd1)))
        vel = np.zeros((3, len(jd1))) if velocity else None
        for key in self._chain(self._code(body)):
            if velocity:
                p, v = self._evaluate(key, jd1, jd2, velocity=True)
                vel += v
            else:
                p = self._evaluate(key, jd1, jd2, velocity=False)
            pos += p
        return (pos * KM).T, None if vel is None else (vel * KM).T

    def position(self, body: str, tdb: SplitTime) -> np.ndarray:
        """Barycentric position (m) of ``body``, shape (N, 3); the Chebyshev series
        only, without the velocity."""
        return self.posvel_jd(body, tdb.jd1, tdb.jd2, velocity=False)[0]

    def _evaluate(self, key, jd1: np.ndarray, jd2: np.ndarray, velocity: bool):
        """One segment's Chebyshev series: km (and km/s) at each time, shape (3, N).

        The interval and its offset are found as jplephem does (whole and fractional
        Julian dates kept apart, so no precision is lost); the series are summed
        interval by interval (timingkit.numerics.chebyshev_grid.chebyshev_sum) rather
        than through jplephem's per-time gather of the coefficients, which costs ~4x
        as much for 1e5-1e6 times."""
        segment = self._segments[key]
        if key not in self._arrays:
            self._arrays[key] = segment.load_array()   # (start JD, days, (3, n, terms))
        initial_jd, interval_days, coefficients = self._arrays[key]
        interval_s = interval_days * SECONDS_PER_DAY
        index1, offset1 = np.divmod((jd1 - initial_jd) * SECONDS_PER_DAY, interval_s)
        index2, offset2 = np.divmod(jd2 * SECONDS_PER_DAY, interval_s)
        index3, offset = np.divmod(offset1 + offset2, interval_s)
        index = (index1 + index2 + index3).astype(np.intp)
        count = coefficients.shape[1]
        last = index == count                        # the segment's very end
        index[last] -= 1
        offset[last] += interval_s
        if np.any((index < 0) | (index >= count)):
            raise InputError("time outside the ephemeris segment", path=self.path)
        order = np.argsort(index, kind="stable")
        used, counts = np.unique(index[order], return_counts=True)
        coeffs = np.transpose(coefficients[:, used, :], (2, 1, 0))   # (terms, m, 3)
        x = 2.0 * offset[order] / interval_s - 1.0
        result = chebyshev_sum(coeffs, counts, x, derivative=velocity)
        values, slopes = result if velocity else (result, None)
        pos = np.empty_like(values)
        pos[:, order] = values
        if not velocity:
            return pos
        vel = np.empty_like(slopes)
        vel[:, order] = slopes * (2.0 / interval_s)
        return pos, vel

    @staticmethod
    def _code(body: str) -> int:
        try:
            return BODY_CODES[body]
        except KeyError:
            raise ValueError(f"unknown body {body!r}; known: {', '.join(BODY_CODES)}") from None


@lru_cache(maxsize=8)
def _load(path: str, label: str) -> Ephemeris:
    return Ephemeris(path, label)


def load_ephemeris(spec: str | None = None, base_dir: str | None = None) -> Ephemeris:
    """Open the built-in DE421 (``None`` or ``'builtin'``) or a ``.bsp`` by path.

    Relative paths are taken relative to ``base_dir`` (the model file's folder).
    Opened files are cached, so a worker pays for loading once.
    """
    if spec in (None, "", BUILTIN_NAME, "de421"):
        return _load(builtin_ephemeris_path(), "builtin DE421 (JPL; via skyfield-data)")
    path = spec
    if base_dir and not os.path.isabs(path):
        path = os.path.join(base_dir, path)
    path = os.path.abspath(path)
    return _load(path, os.path.basename(path))
