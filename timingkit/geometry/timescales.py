"""Time scales: site clock -> UTC -> TT(TAI) -> TDB at the site.

UTC -> TT goes through ERFA with the bundled leap-second table (geometry.leap_seconds;
the table astropy uses, never downloaded).
TT -> TDB uses ``erfa.dtdb`` (Fairhead & Bretagnon 1990 series with the
topocentric terms of the site, ~2 µs daily), evaluated with UT1 as the
"universal time" argument, as the SOFA documentation prescribes. Accuracy of
the series: a few ns over 1600-2200 (SOFA); agreement with astropy < 1 ns.
"""

from __future__ import annotations

import warnings

import erfa
import numpy as np
from timingkit.geometry import leap_seconds
from timingkit.numerics.chebyshev_grid import NodeCache, evaluate_on_grid
from timingkit.numerics.timearray import MJD_TO_JD, SplitTime


def _from_jd(jd1: np.ndarray, jd2: np.ndarray, scale: str) -> SplitTime:
    mjd1 = jd1 - MJD_TO_JD  # exact: jd1 is integer or half-integer
    day = np.floor(mjd1)
    return SplitTime(day, (mjd1 - day) + jd2, scale).normalized()


def _through_tai(time: SplitTime, to_tai, from_tai, scale: str) -> SplitTime:
    """Convert through TAI with two erfa functions, the bundled leap seconds
    installed first (the path of astropy's ``Time(...).tt``/``.utc``, without
    importing astropy.time). erfa warns "dubious year" beyond the leap-second
    table; the caller turns that into one clear warning for the report (see
    leap_second_warnings)."""
    leap_seconds.install()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        jd1, jd2 = from_tai(*to_tai(time.jd1, time.jd2))
        return _from_jd(jd1, jd2, scale)


def utc_to_tt(utc: SplitTime) -> SplitTime:
    """UTC -> TT (= TAI + 32.184 s) with the bundled leap seconds."""
    return _through_tai(utc, erfa.utctai, erfa.taitt, "tt")


def tt_minus_utc_s(utc: SplitTime, tt: SplitTime) -> np.ndarray:
    """TT - UTC (s) of times converted by ``utc_to_tt``, without the rounding
    of the two-part TT (up to ~5 ps): since 1972 TAI - UTC is a whole number
    of seconds (IERS), so TT - UTC = n + 32.184 s exactly, plus f x (+-1 s) on a
    day with a leap second (the MJD fraction f is of the 86401-s day). A value
    within 1 ns of that is taken as exact; earlier dates keep astropy's value."""
    hi, lo = tt.seconds_since(utc.day, utc.frac)
    raw = hi + lo
    out = raw.copy()
    for leap in (-1.0, 1.0, 0.0):
        stretch = utc.frac * leap
        exact = np.round(raw - 32.184 - stretch) + 32.184 + stretch
        out = np.where(np.abs(raw - exact) < 1e-9, exact, out)
    return out


def tt_minus_utc_on_days(days) -> np.ndarray:
    """TT - UTC (s) at 0h UTC of the whole MJDs ``days``, from the bundled
    leap seconds through ERFA: n + 32.184 s exactly from 1972 on. TAI - UTC
    then changes only at 0h UTC, so it holds for every clock reading of the day
    (00:00:00 to 23:59:60)."""
    days = np.atleast_1d(np.asarray(days, dtype=float))
    utc = SplitTime(days, np.zeros_like(days), "utc")
    return tt_minus_utc_s(utc, utc_to_tt(utc))


def tt_to_utc(tt: SplitTime) -> SplitTime:
    """TT -> UTC with the bundled leap seconds."""
    return _through_tai(tt, erfa.tttai, erfa.taiutc, "utc")


# Chebyshev grids (timingkit.numerics.chebyshev_grid) for the functions G, C, S, B of
# tdb_minus_tt_s, as (max interval width in days, degree). Max error on full-width
# intervals against erfa.dtdb, 2000-2040, measured: G 0.15, 0.1, 1.4, 1.0, 2.1, 0.4,
# 0.03, 0.002 ps; C, S, B times 6400 km: 4, 4, 2.4, 5.7, 3 ps. Total < 20 ps.
TDB_GEOCENTRIC_SCHEMES = ((0.1, 2), (0.5, 3), (1.0, 3), (2.0, 4), (4.0, 5), (8.0, 8),
                          (16.0, 14), (32.0, 25))
TDB_TOPOCENTRIC_SCHEMES = ((0.5, 1), (4.0, 2), (8.0, 3), (16.0, 4), (32.0, 7))
# cost weights in units of one erfa.dtdb call (~8 us): one Chebyshev term for one TOA
# (~2 ns) and for one interval (~1 us)
_TERM_PER_TOA_COST = 2.5e-4
_TERM_PER_INTERVAL_COST = 0.12


# nodes of dense data kept between runs (timingkit.numerics.chebyshev_grid.NodeCache)
TDB_NODE_CACHES = (NodeCache(f"tdb-geocentric-erfa{erfa.__version__}", *TDB_GEOCENTRIC_SCHEMES[-1]),
                   NodeCache(f"tdb-topocentric-erfa{erfa.__version__}",
                             *TDB_TOPOCENTRIC_SCHEMES[-1]))


def _dtdb_geocentric(mjd_tt: np.ndarray) -> np.ndarray:
    return erfa.dtdb(MJD_TO_JD, mjd_tt, 0.0, 0.0, 0.0, 0.0)[None, :]


def _dtdb_topocentric(mjd_tt: np.ndarray) -> np.ndarray:
    """C, S, B of tdb_minus_tt_s (s per km) at TT MJDs."""
    g = erfa.dtdb(MJD_TO_JD, mjd_tt, 0.0, 0.0, 0.0, 0.0)
    return np.array([erfa.dtdb(MJD_TO_JD, mjd_tt, 0.25, 0.0, 1.0, 0.0) - g,
                     erfa.dtdb(MJD_TO_JD, mjd_tt, 0.0, 0.0, 1.0, 0.0) - g,
                     erfa.dtdb(MJD_TO_JD, mjd_tt, 0.0, 0.0, 0.0, 1.0) - g])


def tdb_minus_tt_s(tt: SplitTime, ut1_fraction_of_day: np.ndarray,
                   longitude_rad: float = 0.0, spin_axis_distance_km: float = 0.0,
                   equator_distance_km: float = 0.0, direct: bool = False) -> np.ndarray:
    """TDB - TT in seconds at a site (erfa.dtdb; geocentric when distances are 0).

    erfa.dtdb is exactly G(t) + u [C(t) sin(s) + S(t) cos(s)] + v B(t), with
    s = 2 pi UT1 + longitude and G, C, S, B slowly varying (the FB90 series and
    the topocentric terms of Moyer 1981 as coded in SOFA). For many TOAs these
    four functions are evaluated by erfa on Chebyshev nodes, only on the days
    that hold TOAs, and interpolated (error < 20 ps, see the schemes above); few
    TOAs, or all with ``direct``, are evaluated directly. Written out here because the full series per TOA
    costs ~8 µs each (8 s per million TOAs).
    """
    ut = np.broadcast_to(np.asarray(ut1_fraction_of_day, dtype=float), tt.day.shape)
    # site coordinates may be scalars or one value per TOA
    longitude_rad = np.broadcast_to(np.asarray(longitude_rad, dtype=float), tt.day.shape)
    u = np.broadcast_to(np.asarray(spin_axis_distance_km, dtype=float), tt.day.shape)
    v = np.broadcast_to(np.asarray(equator_distance_km, dtype=float), tt.day.shape)
    if len(tt.day) == 0:
        return np.empty(0)
    if direct:
        return erfa.dtdb(tt.jd1, tt.jd2, ut, longitude_rad, u, v)
    # the grid needs one float MJD per TOA (~1e-11 day resolution: ample for
    # functions varying on day time-scales); the series argument is exact at the nodes
    mjd = tt.day + tt.frac
    costs = dict(term_per_toa_cost=_TERM_PER_TOA_COST,
                 term_per_interval_cost=_TERM_PER_INTERVAL_COST)
    out = evaluate_on_grid(mjd, _dtdb_geocentric, TDB_GEOCENTRIC_SCHEMES,
                           cache=TDB_NODE_CACHES[0], **costs)[0]
    if np.any(u != 0.0) or np.any(v != 0.0):
        c, s, b = evaluate_on_grid(mjd, _dtdb_topocentric, TDB_TOPOCENTRIC_SCHEMES,
                                   cache=TDB_NODE_CACHES[1], **costs)
        solar = 2.0 * np.pi * ut + longitude_rad
        out = out + u * (c * np.sin(solar) + s * np.cos(solar)) + v * b
    return out


def tt_to_tdb(tt: SplitTime, ut1_fraction_of_day, longitude_rad=0.0,
              spin_axis_distance_km=0.0, equator_distance_km=0.0,
              direct: bool = False) -> SplitTime:
    """TT -> TDB at the site given by its longitude and the (u, v) distances
    (``direct``: the series at every time, no interpolation)."""
    delta = tdb_minus_tt_s(tt, ut1_fraction_of_day, longitude_rad,
                           spin_axis_distance_km, equator_distance_km, direct)
    return tt.add_seconds(delta).with_scale("tdb")


def tdb_to_tt_geocentric(tdb: SplitTime) -> SplitTime:
    """Invert TT->TDB at the geocentre (two fixed-point steps, < 1 ps)."""
    tt = tdb.with_scale("tt")
    for _ in range(2):
        tt = tdb.add_seconds(-tdb_minus_tt_s(tt, tt.frac)).with_scale("tt")
    return tt


def leap_second_table_end_mjd() -> float:
    """Last MJD for which the bundled leap-second table is known valid."""
    try:
        return leap_seconds.install()
    except Exception:  # pragma: no cover - a damaged bundled file
        return float("nan")


def leap_second_warnings(utc: SplitTime) -> list[str]:
    """A warning when TOAs lie past the bundled leap-second table's expiry:
    a leap second announced later would shift them by 1 s."""
    end = leap_second_table_end_mjd()
    if not np.isfinite(end):
        return []
    beyond = utc.mjd > end
    if not np.any(beyond):
        return []
    return [f"{int(beyond.sum())} TOA(s) lie after MJD {end:.0f}, where the bundled leap-second "
            "table expires: UTC->TT there assumes no further leap seconds (update astropy / "
            "astropy-iers-data for a newer table)"]
