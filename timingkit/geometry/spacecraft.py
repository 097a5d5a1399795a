"""An observer on a spacecraft, given by its geocentric GCRS trajectory.

The orbit table (timingkit.formats.orbit_table) is interpolated per
coordinate: with velocities by cubic Hermite interpolation (position and
velocity match the table at every row), without by a not-a-knot cubic spline
(scipy.interpolate). The interpolation error is estimated from the table
itself: the interpolant of every second row is compared with the rows left
out, and, the error of a cubic scaling as the fourth power of the row spacing,
one sixteenth of the largest difference is stated as the error at the full
spacing.

As DESIGN.md §3 asks, the spacecraft's own position serves for both the time
scale and the Roemer delay: TDB - TT at the spacecraft is the geocentric
series (erfa.dtdb) plus v_E . r / c^2, with v_E the barycentric velocity of
the Earth and r the spacecraft's geocentric position (the position-dependent
term of the TCB-TCG transformation, IERS Conventions 2010, ch. 10; for a place
on the Earth it is what erfa.dtdb's topocentric terms expand, ~2 µs at the
surface), and the observer's barycentric position is the Earth's plus r.
"""

from __future__ import annotations

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.orbit_table import OrbitTable
from timingkit.formats.toa_table import ToaTable
from timingkit.geometry import timescales
from timingkit.geometry.delays import SPEED_OF_LIGHT_M_PER_S
from timingkit.geometry.ephemeris import Ephemeris
from timingkit.geometry.observations import Observations, observations_at
from timingkit.geometry.utc_seconds import utc_elapsed_to_tt
from timingkit.numerics.timearray import SplitTime

WARN_ERROR_M = 30.0         # ~100 ns of light travel: say so
REFUSE_ERROR_M = 3.0e4      # ~100 µs: the table cannot be right (units, gaps)


class SpacecraftTrajectory:
    """Interpolated GCRS position and velocity of a spacecraft on TT.

    ``interpolation_error_m``: the stated error (see the module docstring;
    NaN for tables under 8 rows); ``method``: 'cubic Hermite' or 'cubic spline'.
    """

    def __init__(self, table: OrbitTable, name: str = "spacecraft"):
        from scipy.interpolate import CubicHermiteSpline, CubicSpline
        self.path = table.path
        self.name = name
        tt = _to_tt(table)
        self.start_day, self.start_frac = float(tt.day[0]), float(tt.frac[0])
        self.start_tt, self.end_tt = tt[0], tt[len(tt) - 1]
        hi, lo = tt.seconds_since(self.start_day, self.start_frac)
        x = hi + lo
        self.span_s = float(x[-1])
        self.spacing_s = float(np.median(np.diff(x)))
        self.max_spacing_s = float(np.max(np.diff(x)))
        pos, vel = table.position_m, table.velocity_m_per_s
        if vel is not None:
            self.method = "cubic Hermite"
            self._interpolant = CubicHermiteSpline(x, pos, vel, axis=0)
            build = lambda xs, rows: CubicHermiteSpline(xs, pos[rows], vel[rows], axis=0)  # noqa: E731
        else:
            self.method = "cubic spline"
            self._interpolant = CubicSpline(x, pos, axis=0)
            build = lambda xs, rows: CubicSpline(xs, pos[rows], axis=0)  # noqa: E731
        self._velocity = self._interpolant.derivative()
        self.interpolation_error_m = float("nan")
        if len(x) >= 8:
            even = np.arange(0, len(x), 2)
            odd = np.arange(1, len(x) - 1, 2)
            coarse = build(x[even], even)
            miss = np.linalg.norm(coarse(x[odd]) - pos[odd], axis=1)
            self.interpolation_error_m = float(np.max(miss)) / 16.0
        if self.interpolation_error_m > REFUSE_ERROR_M:
            raise InputError(
                f"the orbit cannot be interpolated: rows one step apart disagree by "
                f"{self.interpolation_error_m * 16 / 1e3:.0f} km with their neighbours (positions "
                "in metres and velocities in m/s? gaps in the table?)", path=table.path)

    @property
    def interpolation_error_ns(self) -> float:
        return self.interpolation_error_m / SPEED_OF_LIGHT_M_PER_S * 1e9

    def warnings(self) -> list[str]:
        if self.interpolation_error_m > WARN_ERROR_M:
            return [f"the orbit table's interpolation error is about "
                    f"{self.interpolation_error_m:.0f} m ({self.interpolation_error_ns:.0f} ns of "
                    "light travel): give a denser table (with velocities) for better timing"]
        return []

    def summary(self) -> dict:
        return {"orbit_file": self.path, "interpolation": self.method,
                "rows_spacing_s": self.spacing_s, "largest_spacing_s": self.max_spacing_s,
                "interpolation_error_m": self.interpolation_error_m,
                "interpolation_error_ns": self.interpolation_error_ns,
                "error_estimate": "from every second row against the rows between, / 16"}

    def _seconds(self, tt: SplitTime) -> np.ndarray:
        hi, lo = tt.seconds_since(self.start_day, self.start_frac)
        return hi + lo

    def check_covers(self, tt: SplitTime, where=None) -> None:
        """InputError when any time lies outside the table."""
        x = self._seconds(tt)
        outside = (x < 0.0) | (x > self.span_s)
        if np.any(outside):
            first = int(np.flatnonzero(outside)[0])
            raise InputError(
                f"{int(outside.sum())} event(s) lie outside the orbit table, which covers MJD "
                f"{self.start_tt.mjd[0]:.6f} to {self.end_tt.mjd[0]:.6f} (TT); first: MJD "
                f"{tt.mjd[first]:.6f}; give an orbit table that covers the events",
                path=self.path if where is None else where)

    def posvel(self, tt: SplitTime) -> tuple[np.ndarray, np.ndarray]:
        """GCRS position (m) and velocity (m/s), (N, 3), at TT times inside the table."""
        x = self._seconds(tt)
        return self._interpolant(x), self._velocity(x)


def _to_tt(table: OrbitTable) -> SplitTime:
    times = table.times
    if times.scale == "tt":
        return times
    if table.utc_elapsed_from is not None:    # FITS TIME on UTC: elapsed seconds, as for events
        offset_s = utc_elapsed_to_tt(*table.utc_elapsed_from).tt_minus_utc_s
        return times.with_scale("tt").add_seconds(np.full(len(times), offset_s))
    if times.scale == "utc":
        return timescales.utc_to_tt(times)
    # TDB rows: the geocentric inverse; the spacecraft term (< 3 µs in time for
    # orbits within 10 Earth radii) moves a position by < 3 cm
    return timescales.tdb_to_tt_geocentric(times)


def spacecraft_tdb(tt: SplitTime, geocentric_m: np.ndarray, ephemeris: Ephemeris) -> SplitTime:
    """TDB at the spacecraft: geocentric TDB - TT plus v_E . r / c^2 (module docstring)."""
    geocentric = timescales.tt_to_tdb(tt, tt.frac)
    _, earth_vel = ephemeris.posvel("earth", geocentric)
    term_s = np.einsum("ij,ij->i", earth_vel, geocentric_m) / SPEED_OF_LIGHT_M_PER_S ** 2
    return geocentric.add_seconds(term_s)


def spacecraft_observations(tt: SplitTime, trajectory: SpacecraftTrajectory,
                            ephemeris: Ephemeris, planets: bool = False) -> Observations:
    """Observations of the spacecraft at TT times ``tt``: inside its table, or
    at most a few grid steps beyond it (the cubic is then extrapolated; callers
    check the events themselves with ``check_covers``)."""
    pos, vel = trajectory.posvel(tt)
    tdb = spacecraft_tdb(tt, pos, ephemeris)
    n = len(tt)
    toas = ToaTable(mjd_text=np.full(n, "", dtype="<U1"), mjd_day=tt.day, mjd_frac=tt.frac,
                    err_us=np.ones(n), freq_mhz=np.full(n, np.inf),
                    site=np.full(n, trajectory.name))
    return observations_at(toas, tdb, pos, vel, np.zeros(n, dtype=bool),
                           np.full(n, trajectory.name), ephemeris, planets,
                           warnings=trajectory.warnings())
