"""Time scales through the project's own path, against published values and astropy."""

import numpy as np
import pytest

from timingkit.geometry import timescales
from timingkit.numerics.timearray import SplitTime

J2000_MJD = 51544.5
DAYS_PER_MILLENNIUM = 365250.0


def test_tdb_minus_tt_main_annual_term():
    # Fairhead & Bretagnon (1990), A&A 229, 240: main term of TDB-TT is
    # 1656.674564 µs sin(6283.075849991 T + 6.240054195), T in Julian millennia
    # from J2000 (TDB). The next largest terms (also FB90, as tabulated in the
    # SOFA/ERFA dtdb series; from memory) are included as regressors, as is the
    # T*sin term of the annual frequency, so the fitted amplitude is clean.
    # 200 years, so that neighbouring unresolved terms average out (measured
    # residual bias ~0.05 µs; tolerance 0.1 µs).
    days = np.arange(J2000_MJD - 36500, J2000_MJD + 36500, 2.0)
    tt = SplitTime(np.floor(days), days - np.floor(days), "tt")
    delta = timescales.tdb_minus_tt_s(tt, np.zeros_like(days))
    t_mill = (days - J2000_MJD) / DAYS_PER_MILLENNIUM
    freqs = [6283.075849991, 5753.384884897, 12566.151699983, 529.690965095, 6069.776754553,
             213.299095438, 77713.771467920, 7860.419392439, 1577.343542448]
    cols = [np.ones_like(days), t_mill]
    for w in freqs:
        cols += [np.sin(w * t_mill), np.cos(w * t_mill)]
    cols += [t_mill * np.sin(freqs[0] * t_mill), t_mill * np.cos(freqs[0] * t_mill)]
    coef, *_ = np.linalg.lstsq(np.column_stack(cols), delta, rcond=None)
    amplitude_us = np.hypot(coef[2], coef[3]) * 1e6
    phase = np.arctan2(coef[3], coef[2]) % (2 * np.pi)   # a sin(x+p) = a cos p sin x + a sin p cos x
    assert abs(amplitude_us - 1656.674564) < 0.1
    assert abs(phase - 6.240054195) < 1e-4


def test_utc_to_tt_across_a_leap_second():
    # 2016-12-31 leap second (IERS Bulletin C 52): TAI-UTC 36 s -> 37 s, so
    # TT-UTC = 68.184 s before and 69.184 s after.
    # (On the leap-second day itself the MJD fraction is of an 86401-s day: the
    # ERFA/astropy convention, which timingkit follows.)
    before = SplitTime([57752.0], [0.5], "utc")
    after = SplitTime([57754.0], [0.5], "utc")
    for t, expected in ((before, 68.184), (after, 69.184)):
        tt = timescales.utc_to_tt(t)
        hi, lo = tt.seconds_since(t.day[0], t.frac[0])
        assert abs(hi[0] + lo[0] - expected) < 1e-9


def test_sofa_time_scale_worked_example(tmp_path):
    # IAU SOFA "Time Scale and Calendar Tools", worked example: UTC
    # 2006-01-15 21:24:37.5 at latitude +19.48125 deg, longitude -155.933222 deg
    # (UT1-UTC = +0.3341 s) gives TDB 2006-01-15 21:25:42.684373. Through the
    # project's own path: a site file, the TOA table, prepare_observations.
    pytest.importorskip("timingkit.geometry.sites")
    from timingkit.geometry.ephemeris import load_ephemeris
    from timingkit.geometry.observations import prepare_observations
    from timingkit.geometry.sites import SiteTable
    from timingkit.formats.toa_table import ToaTable
    site_file = tmp_path / "sites.toml"
    site_file.write_text("[site.sofa-example]\nlongitude_deg = -155.933222\n"
                         "latitude_deg = 19.48125\nheight_m = 0.0\n")
    sites = SiteTable.with_files([str(site_file)])
    utc_frac = (21 * 3600 + 24 * 60 + 37.5) / 86400.0
    toas = ToaTable.from_arrays(np.array([53750.0]), np.array([utc_frac]), np.array([1.0]),
                            np.array([1400.0]), np.array(["sofa-example"]))
    obs = prepare_observations(toas, sites, load_ephemeris())
    hi, lo = obs.tdb.seconds_since(53750.0, 0.0)
    expected = 21 * 3600 + 25 * 60 + 42.684373
    assert abs(hi[0] + lo[0] - expected) < 1e-6


def test_fast_tdb_path_matches_erfa_directly():
    # The gridded evaluation must reproduce erfa.dtdb (SOFA) per TOA to < 50 ps.
    import erfa
    rng = np.random.default_rng(7)
    n = 20000
    mjd = np.sort(rng.uniform(51544.0, 51544.0 + 3 * 365.25, n))
    day = np.floor(mjd)
    tt = SplitTime(day, mjd - day, "tt")
    ut = rng.random(n)
    fast = timescales.tdb_minus_tt_s(tt, ut, -1.9, 5300.0, 3500.0)
    direct = erfa.dtdb(tt.jd1, tt.jd2, ut, -1.9, 5300.0, 3500.0)
    assert np.max(np.abs(fast - direct)) < 5e-11


@pytest.mark.parametrize("kind", ["geocentric", "topocentric"])
def test_every_tdb_grid_scheme_meets_its_bound(kind):
    # Each Chebyshev scheme forced on full-width intervals crowded with TOAs, against
    # erfa.dtdb (SOFA) evaluated directly: G within 5 ps, the topocentric C, S, B
    # (times 6400 km) within 15 ps, so that the sum stays below the 20 ps stated.
    import erfa
    from timingkit.numerics.chebyshev_grid import evaluate_on_grid
    function = timescales._dtdb_geocentric if kind == "geocentric" else timescales._dtdb_topocentric
    schemes = (timescales.TDB_GEOCENTRIC_SCHEMES if kind == "geocentric"
               else timescales.TDB_TOPOCENTRIC_SCHEMES)
    for width, degree in schemes:
        rng = np.random.default_rng(int(width * 10) + degree)
        starts = rng.uniform(51544.0, 66154.0, 8)
        mjd = (starts[:, None] + np.linspace(0.0, width * 0.999, 3 * (degree + 1))[None, :]).ravel()
        grid = evaluate_on_grid(mjd, function, ((width, degree),), term_per_toa_cost=1e-4,
                                term_per_interval_cost=0.1)
        g = erfa.dtdb(2400000.5, mjd, 0.0, 0.0, 0.0, 0.0)
        if kind == "geocentric":
            assert np.max(np.abs(grid[0] - g)) < 5e-12, (width, degree)
        else:
            direct = np.array([erfa.dtdb(2400000.5, mjd, 0.25, 0.0, 1.0, 0.0) - g,
                               erfa.dtdb(2400000.5, mjd, 0.0, 0.0, 1.0, 0.0) - g,
                               erfa.dtdb(2400000.5, mjd, 0.0, 0.0, 0.0, 1.0) - g])
            assert np.max(np.abs(grid - direct)) * 6400.0 < 1.5e-11, (width, degree)


def test_tdb_grid_serves_only_days_with_toas(tmp_path, monkeypatch):
    # Two 3-hour sessions 30 years apart with many TOAs each: the series is evaluated at
    # the nodes of the two intervals that hold them, not on a grid over the 30 years
    # between (~11,000 days); a second run takes every node from the cache.
    import erfa
    from unittest import mock
    from timingkit.numerics.chebyshev_grid import NodeCache
    monkeypatch.setenv("TIMINGKIT_CACHE_DIR", str(tmp_path))
    fresh = tuple(NodeCache(c.name, c.width, c.degree) for c in timescales.TDB_NODE_CACHES)
    monkeypatch.setattr(timescales, "TDB_NODE_CACHES", fresh)
    rng = np.random.default_rng(2)
    mjd = np.sort(np.r_[50000.2 + rng.uniform(0, 0.12, 5000), 61000.6 + rng.uniform(0, 0.12, 5000)])
    day = np.floor(mjd)
    tt = SplitTime(day, mjd - day, "tt")
    real = erfa.dtdb
    direct = real(tt.jd1, tt.jd2, tt.frac, 0.3, 5300.0, 3500.0)   # source: erfa.dtdb (SOFA)
    for run, limit in ((1, 200), (2, 0)):
        calls = []

        def counting(*args):
            calls.append(np.size(args[1]))
            return real(*args)

        with mock.patch.object(timescales.erfa, "dtdb", counting):
            fast = timescales.tdb_minus_tt_s(tt, tt.frac, 0.3, 5300.0, 3500.0)
        assert sum(calls) <= limit, run
        assert np.max(np.abs(fast - direct)) < 2e-11
        fresh[0]._values = fresh[1]._values = None          # the next run reads the files
