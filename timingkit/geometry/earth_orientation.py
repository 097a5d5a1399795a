"""Earth orientation, offline: UT1-UTC, polar motion and the celestial pole.

Values come from astropy's bundled IERS table (``astropy.utils.iers.IERS_Auto``
read from the ``astropy-iers-data`` package: IERS-B where final, IERS-A
(Bulletin A, including its one-year forecast) after that). Nothing is ever
downloaded: ``astropy.utils.iers.conf.auto_download`` is set to False before the table is
opened (astropy.utils.iers is imported only then: with the parsed table cached on disk, most
runs never import it).

Interpolation follows astropy's own rule exactly (linear between the daily
rows, UT1-UTC steps at leap seconds removed before interpolating), so the
numbers agree with ``Time.delta_ut1_utc`` and astropy's polar motion to
rounding. We index the table ourselves with ``np.searchsorted`` instead of
going through ``Time`` objects: the same arithmetic, without building a
``Time`` per call (about 10 ms for a million TOAs).

Outside the table (before 1973-01-02, after the end of the bundled forecast)
we do what astropy does: UT1-UTC is held at the first/last tabulated value and
the pole is put at the IERS 50-year mean pole (x, y) = (0.035, 0.29) arcsec.
``coverage_warnings`` says so in words, with the accuracy this costs.

The celestial intermediate pole (CIP) X, Y and the CIO locator s (IAU 2006
precession + IAU 2000A nutation, ``erfa.xys06a``) are offered interpolated
(``cip_xys``): the series costs ~40-60 us per date, so we evaluate it on a few
Chebyshev nodes per interval and interpolate; the measured error is below
24 micro-arcsec per coordinate (0.75 mm at the Earth's surface, 2.5 ps of
light time) for every interval scheme.
"""

from __future__ import annotations

import functools
import warnings
from dataclasses import dataclass

import erfa
import numpy as np

from timingkit.numerics.chebyshev_grid import NodeCache, evaluate_on_grid
from timingkit.numerics.timearray import SplitTime


ARCSEC_TO_RAD = np.pi / (180.0 * 3600.0)

# The IERS 50-year mean pole used for times outside the table; the value and
# the choice are astropy's (astropy.coordinates.builtin_frames.utils._DEFAULT_PM),
# kept identical so that our results match astropy's beyond the table as well.
MEAN_POLE_ARCSEC = (0.035, 0.29)

# Earth's rotation rate, rad per second of UT1: d(ERA)/dt of IERS Conventions
# 2010 eq. 5.15, 2*pi*1.00273781191135448/86400 (the value astropy uses).
EARTH_ROTATION_RATE_RAD_PER_S = 2.0 * np.pi * 1.00273781191135448 / 86400.0


@dataclass(frozen=True)
class EopTable:
    """The bundled IERS table as plain arrays (daily rows at 0h UTC)."""
    mjd: np.ndarray            # integer-valued float MJD (UTC)
    ut1_minus_utc_s: np.ndarray
    xp_rad: np.ndarray
    yp_rad: np.ndarray
    predicted_from_mjd: float  # first row that is a forecast, not a measurement
    source: str

    @property
    def first_mjd(self) -> float:
        return float(self.mjd[0])

    @property
    def last_mjd(self) -> float:
        return float(self.mjd[-1])


def _bundle_label() -> str:
    try:
        from importlib.metadata import version
        return f"astropy-iers-data {version('astropy-iers-data')}"
    except Exception:   # metadata missing: say what we know
        return "astropy's bundled IERS data"


def _cache_path() -> str | None:
    """Where the parsed table is kept between runs: $TIMINGKIT_CACHE_DIR, else
    ~/.cache/timingkit; the file name carries the astropy and IERS-data
    versions, so a new bundled table is parsed afresh."""
    import os
    try:
        from importlib.metadata import version
        key = f"astropy-{version('astropy')}-iers-{version('astropy-iers-data')}"
    except Exception:
        return None
    root = os.environ.get("TIMINGKIT_CACHE_DIR") or os.path.join(
        os.path.expanduser("~"), ".cache", "timingkit")
    return os.path.join(root, f"eop-{key}.npz")


def astropy_iers():
    """astropy.utils.iers with downloads switched off (the only way timingkit opens it)."""
    from astropy.utils import iers
    iers.conf.auto_download = False
    return iers


def _parse_bundled() -> EopTable:
    table = astropy_iers().IERS_Auto.open()
    return EopTable(
        mjd=np.asarray(table["MJD"].to_value("d"), dtype=float),
        ut1_minus_utc_s=np.asarray(table["UT1_UTC"].to_value("s"), dtype=float),
        xp_rad=np.asarray(table["PM_x"].to_value("rad"), dtype=float),
        yp_rad=np.asarray(table["PM_y"].to_value("rad"), dtype=float),
        predicted_from_mjd=float(table.meta.get("predictive_mjd", table["MJD"][-1].value)),
        source=_bundle_label(),
    )


@functools.lru_cache(maxsize=1)
def eop_table() -> EopTable:
    """Astropy's bundled IERS table as arrays. Parsing it costs ~1-2 s, so the
    arrays are cached on disk (a derived copy of the installed file, never a
    download; skipped silently where the cache folder is not writable)."""
    import os
    import tempfile
    path = _cache_path()
    if path and os.path.exists(path):
        try:
            with np.load(path) as z:
                return EopTable(mjd=z["mjd"], ut1_minus_utc_s=z["ut1_minus_utc_s"],
                                xp_rad=z["xp_rad"], yp_rad=z["yp_rad"],
                                predicted_from_mjd=float(z["predicted_from_mjd"]),
                                source=str(z["source"]))
        except Exception:   # damaged cache: parse again below
            pass
    table = _parse_bundled()
    if path:
        try:
            os.makedirs(os.path.dirname(path), exist_ok=True)
            fd, tmp = tempfile.mkstemp(prefix=".eop-", suffix=".npz", dir=os.path.dirname(path))
            with os.fdopen(fd, "wb") as fh:
                np.savez(fh, mjd=table.mjd, ut1_minus_utc_s=table.ut1_minus_utc_s,
                         xp_rad=table.xp_rad, yp_rad=table.yp_rad,
                         predicted_from_mjd=table.predicted_from_mjd, source=table.source)
            os.replace(tmp, path)
        except OSError:
            pass
    return table


def _require_utc(utc: SplitTime) -> None:
    if utc.scale != "utc":
        raise ValueError(f"expected UTC times, got scale '{utc.scale}'")


def _interp_rows(utc: SplitTime, columns, unwrap_leap_seconds):
    """astropy's IERS interpolation (astropy.utils.iers.IERS._interpolate),
    vectorised: returns the interpolated columns and masks (before, after)
    for times outside the table (values there are the first/last row)."""
    tab = eop_table()
    day = utc.day + np.floor(utc.frac)       # tolerate un-normalised fractions
    frac = utc.frac - np.floor(utc.frac)
    n = len(tab.mjd)
    i = np.searchsorted(tab.mjd, day, side="right")
    i1 = np.clip(i, 1, n - 1)
    i0 = i1 - 1
    step = (day - tab.mjd[i0] + frac) / (tab.mjd[i1] - tab.mjd[i0])
    before, after = i == 0, i == n
    out = []
    for col, unwrap in zip(columns, unwrap_leap_seconds):
        v0, v1 = col[i0], col[i1]
        dv = v1 - v0
        if unwrap:
            dv = dv - np.round(dv)   # a leap second lands on the later row only
        val = v0 + step * dv
        val[before] = col[0]
        val[after] = col[-1]
        out.append(val)
    return out, before, after


def eop_values(utc: SplitTime) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(UT1-UTC in s, xp in rad, yp in rad) at each UTC time, in one table
    look-up; the same values as ``ut1_minus_utc_s`` and ``polar_motion_rad``."""
    _require_utc(utc)
    tab = eop_table()
    (dut1, xp, yp), before, after = _interp_rows(
        utc, [tab.ut1_minus_utc_s, tab.xp_rad, tab.yp_rad], (True, False, False))
    outside = before | after
    xp[outside] = MEAN_POLE_ARCSEC[0] * ARCSEC_TO_RAD
    yp[outside] = MEAN_POLE_ARCSEC[1] * ARCSEC_TO_RAD
    return dut1, xp, yp


def ut1_minus_utc_s(utc: SplitTime) -> np.ndarray:
    """UT1 - UTC in seconds at each UTC time (astropy bundled IERS table).

    Agrees with astropy's ``Time.delta_ut1_utc`` to rounding (~1e-15 s).
    Outside the table the first/last value is held (as astropy does).
    """
    _require_utc(utc)
    tab = eop_table()
    (val,), _, _ = _interp_rows(utc, [tab.ut1_minus_utc_s], (True,))
    return val


def polar_motion_rad(utc: SplitTime) -> tuple[np.ndarray, np.ndarray]:
    """Pole coordinates (xp, yp) in radians at each UTC time.

    Inside the table: linear interpolation of the IERS daily values
    (as astropy). Outside: the IERS 50-year mean pole (0.035", 0.29"), as
    astropy; that may be off by a few tenths of an arcsec (~10 m at the site).
    """
    _, xp, yp = eop_values(utc)
    return xp, yp


def ut1_jd(utc: SplitTime, ut1_minus_utc=None) -> tuple[np.ndarray, np.ndarray]:
    """UT1 as a two-part Julian date, from UTC and UT1-UTC (seconds; looked
    up in the table when not given).

    Uses ``erfa.utcut1`` (which astropy uses too), so leap-second days are
    handled as astropy handles them.
    """
    dut1 = ut1_minus_utc_s(utc) if ut1_minus_utc is None else np.asarray(ut1_minus_utc)
    with warnings.catch_warnings():
        # "dubious year" for dates past the leap-second table; the coverage
        # warning already tells the user about such dates.
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        return erfa.utcut1(utc.jd1, utc.jd2, dut1)


def _mjd_to_date(mjd: float) -> str:
    y, m, d, _ = erfa.jd2cal(2400000.5, float(mjd))
    return f"{int(y):04d}-{int(m):02d}-{int(d):02d}"


def coverage_warnings(utc: SplitTime) -> list[str]:
    """Human warnings for times the bundled IERS table does not cover well.

    Never raises. Returns an empty list when every time lies within the
    measured (not forecast) part of the table.
    """
    tab = eop_table()
    day = np.floor(np.asarray(utc.day) + np.asarray(utc.frac))
    total = len(day)
    span = (f"MJD {tab.first_mjd:.0f} to {tab.last_mjd:.0f} "
            f"({_mjd_to_date(tab.first_mjd)} to {_mjd_to_date(tab.last_mjd)}; {tab.source})")
    held = ("UT1-UTC is held at the table's {edge} value and the pole is put at the IERS "
            "50-year mean (x = 0.035\", y = 0.29\"), as astropy does. ")
    cost = ("UT1-UTC has drifted by up to about 1 s per year (the bundled leap-second table "
            "starts every year from 1972 to 1980 with one); each 0.1 s of UT1 error "
            "moves an equatorial site by 46 m along its daily path (up to 0.16 µs of "
            "Roemer delay), and the mean pole may be off by a few tenths of an arcsec "
            "(~10 m, ~30 ns). A newer astropy-iers-data package extends the table.")
    out = []
    n_before = int(np.count_nonzero(day < tab.first_mjd))
    n_after = int(np.count_nonzero(day >= tab.last_mjd))
    if n_before:
        out.append(f"Earth orientation: {n_before} of {total} TOAs lie before the bundled IERS "
                   f"table, which covers {span}. For them " + held.format(edge="first") + cost)
    if n_after:
        out.append(f"Earth orientation: {n_after} of {total} TOAs lie beyond the end of the "
                   f"bundled IERS table, which covers {span}. For them "
                   + held.format(edge="last") + cost)
    n_pred = int(np.count_nonzero((day >= tab.predicted_from_mjd) & (day < tab.last_mjd)))
    if n_pred:
        out.append(f"Earth orientation: {n_pred} of {total} TOAs fall in the forecast part of "
                   f"the bundled IERS table (from MJD {tab.predicted_from_mjd:.0f}, "
                   f"{_mjd_to_date(tab.predicted_from_mjd)}): those UT1-UTC and pole values are "
                   "IERS Bulletin A predictions, whose UT1-UTC error grows to roughly 0.02 s "
                   "a year ahead (the table's own error column), i.e. ~10 m at the site, "
                   "~30 ns.")
    return out


# ---------------------------------------------------------------------------
# Celestial intermediate pole, interpolated on the Chebyshev grid of
# timingkit.numerics.chebyshev_grid (nodes only where there are TOAs; a scheme is
# (maximum interval width W in days, Chebyshev degree d)).
# Max error over full-width intervals, measured against erfa.xys06a at 20,000
# random TT dates over 2000-2040 (micro-arcsec, worse of X and Y; s is ~600x
# smaller):
#   (0.09, 1) 18.1   (0.5, 2) 13.5   (1, 3) 4.2    (2, 4) 4.3
#   (4, 5) 16.7      (8, 8) 10.7     (16, 14) 7.3  (32, 25) 12.7
# Budget: 24 micro-arcsec = 1.2e-10 rad = 0.75 mm at 6400 km (2.5 ps of light
# time, 40x inside the 3 cm we promise against astropy), with >= 25% margin
# over the measured maxima for the tails of larger samples; a 0.1 mm budget
# costs up to ~25% more time (sessions under 2 h) and ~10% for dense data. Narrower
# intervals do better (error ~ width^(degree+1)). Coarser schemes are not
# possible: the IAU 2000A series has terms of a few days' period at the
# 0.1-1 mas level (a 2-day grid of any order misses by ~0.3 mas), so about
# 0.8 evaluations per day is the floor for dense data.
CIP_SCHEMES = ((0.09, 1), (0.5, 2), (1.0, 3), (2.0, 4), (4.0, 5),
               (8.0, 8), (16.0, 14), (32.0, 25))
CIP_ERROR_BOUND_RAD = 24e-6 / 206264.806

# Relative costs, in units of one series evaluation (~55 us), used to weigh
# schemes against each other: one Chebyshev term for one TOA (~2 ns) and one
# term for one interval (a numpy call, ~1 us).
_TERM_PER_TOA_COST = 4e-5
_TERM_PER_INTERVAL_COST = 2e-2


# Dense data take the nodes of the coarsest scheme on a fixed grid, kept between runs
# (the IAU 2006/2000A series never changes for a given erfa; the key holds its version).
CIP_NODE_CACHE = NodeCache(f"cip-xys06a-erfa{erfa.__version__}", *CIP_SCHEMES[-1])


def _xys06a_mjd(mjd_tt: np.ndarray):
    return np.array(erfa.xys06a(2400000.5, mjd_tt))


def cip_xys(tt: SplitTime, scheme: tuple[float, int] | None = None, direct: bool = False):
    """CIP coordinates X, Y and CIO locator s (radians) at TT times.

    IAU 2006/2000A (``erfa.xys06a``), interpolated as described above: error
    below 24 micro-arcsec (0.75 mm at the Earth's surface). ``scheme`` forces
    one (max_width_days, degree) pair, for testing; ``direct`` evaluates the
    series at every time (no interpolation; ~55 µs per time).
    """
    if tt.scale != "tt":
        raise ValueError(f"expected TT times, got scale '{tt.scale}'")
    if direct:
        return erfa.xys06a(tt.jd1, tt.jd2)
    t = np.asarray(tt.day + tt.frac, dtype=float)
    if len(t) == 0:
        return np.empty(0), np.empty(0), np.empty(0)
    schemes = CIP_SCHEMES if scheme is None else (tuple(scheme),)
    out = evaluate_on_grid(t, _xys06a_mjd, schemes, term_per_toa_cost=_TERM_PER_TOA_COST,
                           term_per_interval_cost=_TERM_PER_INTERVAL_COST,
                           cache=CIP_NODE_CACHE if scheme is None else None)
    return out[0], out[1], out[2]
