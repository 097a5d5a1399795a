"""An observer on a spacecraft, given by its geocentric GCRS trajectory.

The orbit table (timingkit.formats.orbit_table) is interpolated per
coordinate: with velocities by cubic Hermite interpolation (position and
velocity match the table at every row), without by a not-a-knot cubic spline
(scipy.interpolate). The interpolation error is estimated from the table
itself, per region (:func:`interpolation_errors`): the interpolant of every
second row is compared with the rows left out and, the error of a cubic
scaling as the fourth power of the row spacing, one sixteenth of each
difference is the local error at the full spacing; it is doubled (the rows
sample the error, whose largest value lies between them: measured up to 1.2x
the sixteenth on an eccentric orbit) and its largest value stated for the
interior, for the first and last ``END_INTERVALS`` row intervals (where a
spline's end conditions act), and for each gap (an interval over
``GAP_FACTOR`` times the median spacing: the local error next to it scaled by
(gap / spacing)^4).

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
REFUSE_ERROR_M = 3.0e4      # ~100 µs away from gaps: the table cannot be right (units)
GAP_FACTOR = 2.0            # intervals over this many median spacings are gaps
END_INTERVALS = 4           # row intervals at each end stated apart
ERROR_SAFETY = 2.0          # the halving estimate samples the error at rows (docstring)
NEIGHBOUR_ROWS = 6          # rows on each side of a gap whose local errors scale to it
REPORTED_GAPS = 20          # at most this many gaps listed (the largest errors)


class SpacecraftTrajectory:
    """Interpolated GCRS position and velocity of a spacecraft on TT.

    ``interpolation_error_m``: the largest stated error (see the module
    docstring; NaN for tables under 8 rows), ``regions`` the stated errors per
    region (:func:`interpolation_errors`); ``method``: 'cubic Hermite' or
    'cubic spline'.
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
        self.regions = interpolation_errors(x, pos, build, float(self.start_tt.mjd[0]))
        gaps = [g["error_m"] for g in self.regions.get("gaps", [])]
        known = [v for v in (self.clean_error_m, *gaps) if np.isfinite(v)]
        self.interpolation_error_m = float(max(known)) if known else float("nan")
        if self.clean_error_m > REFUSE_ERROR_M:
            raise InputError(
                f"the orbit cannot be interpolated: rows one step apart disagree by "
                f"{self.clean_error_m * 16 / ERROR_SAFETY / 1e3:.0f} km with their neighbours "
                "(positions in metres and velocities in m/s?)", path=table.path)

    @property
    def clean_error_m(self) -> float:
        """The stated error away from gaps (interior and table ends; NaN for
        tables under 8 rows)."""
        values = [self.regions[k]["error_m"] for k in ("interior", "table_ends")
                  if k in self.regions and np.isfinite(self.regions[k]["error_m"])]
        return float(max(values)) if values else float("nan")

    @property
    def interpolation_error_ns(self) -> float:
        return self.interpolation_error_m / SPEED_OF_LIGHT_M_PER_S * 1e9

    def warnings(self) -> list[str]:
        """A warning when the interpolation error away from gaps is large."""
        clean = self.clean_error_m
        if clean > WARN_ERROR_M:
            return [f"the orbit table's interpolation error is up to about {clean:.0f} m "
                    f"({clean / SPEED_OF_LIGHT_M_PER_S * 1e9:.0f} ns of light travel): give a "
                    "denser table (with velocities) for better timing"]
        return []

    def gap_warnings(self, first_mjd: float, last_mjd: float) -> list[str]:
        """A warning on the gaps between TT MJDs ``first_mjd`` and ``last_mjd``
        whose interpolation error is large."""
        gaps = [g for g in self.regions.get("gaps", []) if g["error_m"] > WARN_ERROR_M
                and g["end_mjd"] > first_mjd and g["start_mjd"] < last_mjd]
        if not gaps:
            return []
        worst = max(gaps, key=lambda g: g["error_m"])
        return [f"{len(gaps)} gap(s) in the orbit table (rows over {GAP_FACTOR:g}x the usual "
                f"spacing apart) within the events' span have interpolation errors over "
                f"{WARN_ERROR_M:g} m, up to {worst['error_m']:.3g} m ({worst['error_ns']:.3g} ns) "
                f"in the gap at MJD {worst['start_mjd']:.6f}; events there are timed that much "
                "less well (see settings.observer.interpolation_error_by_region)"]

    def summary(self) -> dict:
        return {"orbit_file": self.path, "interpolation": self.method,
                "rows_spacing_s": self.spacing_s, "largest_spacing_s": self.max_spacing_s,
                "interpolation_error_m": self.interpolation_error_m,
                "interpolation_error_ns": self.interpolation_error_ns,
                "interpolation_error_by_region": self.regions,
                "error_estimate": (f"per region: every second row against the rows between, "
                                   f"/ 16, x {ERROR_SAFETY:g}; gaps (> {GAP_FACTOR:g}x the median "
                                   "spacing): the neighbouring rows' error x (gap / spacing)^4")}

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


def interpolation_errors(x: np.ndarray, pos: np.ndarray, build, start_mjd: float) -> dict:
    """Stated interpolation error per region of a table with rows at ``x`` (s)
    and positions ``pos`` (m), ``build(x_rows, rows)`` making the interpolant
    of a subset (module docstring). {"interior": {...}, "table_ends": {...},
    "gaps": [...]}: each with ``error_m``, ``error_ns`` (light travel) and
    where; empty for tables under 8 rows."""
    if len(x) < 8:
        return {}
    spacing = np.diff(x)
    median = float(np.median(spacing))
    is_gap = spacing > GAP_FACTOR * median
    even, odd = np.arange(0, len(x), 2), np.arange(1, len(x) - 1, 2)
    local = ERROR_SAFETY / 16.0 * np.linalg.norm(build(x[even], even)(x[odd]) - pos[odd], axis=1)
    clean = ~is_gap[odd - 1] & ~is_gap[odd]         # both intervals of the coarse one ordinary
    at_end = (odd <= END_INTERVALS) | (odd >= len(x) - 1 - END_INTERVALS)

    def entry(errors, **where):
        worst = float(np.max(errors)) if len(errors) else float("nan")
        return {"error_m": worst, "error_ns": worst / SPEED_OF_LIGHT_M_PER_S * 1e9, **where}

    out = {"interior": entry(local[clean & ~at_end], rows_spacing_s=median),
           "table_ends": entry(local[clean & at_end], intervals_at_each_end=END_INTERVALS)}
    gaps = []
    for j in np.flatnonzero(is_gap):
        near = clean & (np.abs(odd - j) <= NEIGHBOUR_ROWS)
        base = local[near] if np.any(near) else local[clean]
        scale = (spacing[j] / median) ** 4
        gaps.append(entry(base * scale if len(base) else base,
                          start_mjd=start_mjd + x[j] / 86400.0,
                          end_mjd=start_mjd + x[j + 1] / 86400.0, width_s=float(spacing[j])))
    if gaps:
        gaps.sort(key=lambda g: -g["error_m"])
        out["gaps"] = gaps[:REPORTED_GAPS]
        out["gaps_in_table"] = len(gaps)
    return out


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
