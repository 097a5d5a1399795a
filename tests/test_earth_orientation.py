"""Earth orientation: UT1-UTC, polar motion, coverage warnings, interpolated CIP.

References: astropy (Time.delta_ut1_utc, IERS_Auto.pm_xy, get_polar_motion)
reading the same bundled IERS table; erfa.xys06a (IAU 2006/2000A); IERS
Bulletin C for leap-second dates.
"""

import warnings

import erfa
import numpy as np
import pytest
from astropy.time import Time
from astropy.utils import iers

from timingkit.geometry import earth_orientation as eo
from timingkit.numerics.timearray import SplitTime

RAD_TO_UAS = 180.0 / np.pi * 3600.0e6
CIP_BOUND_UAS = 24.0     # the budget stated in earth_orientation (0.75 mm at 6400 km)


@pytest.fixture(autouse=True)
def astropy_holds_values_offline():
    # With downloads off astropy refuses forecast-range look-ups once its
    # bundled table is older than auto_max_age; None makes it hold values as
    # we do, so the two can be compared anywhere.
    old = iers.conf.auto_max_age
    iers.conf.auto_max_age = None
    yield
    iers.conf.auto_max_age = old


def _utc(mjd):
    mjd = np.asarray(mjd, dtype=float)
    day = np.floor(mjd)
    return SplitTime(day, mjd - day, "utc"), Time(day, mjd - day, format="mjd", scale="utc")


def test_timingkit_opens_the_iers_table_with_downloads_off(tmp_path, monkeypatch):
    # A cold cache makes timingkit parse astropy's bundled table; it must switch
    # astropy's downloads off before opening it, whatever the setting was.
    old = iers.conf.auto_download
    monkeypatch.setenv("TIMINGKIT_CACHE_DIR", str(tmp_path))
    eo.eop_table.cache_clear()
    try:
        iers.conf.auto_download = True
        table = eo.eop_table()
        assert iers.conf.auto_download is False
        assert table.last_mjd > table.first_mjd + 10000
        assert list(tmp_path.glob("eop-*.npz")), "the parsed table is cached"
    finally:
        iers.conf.auto_download = old
        eo.eop_table.cache_clear()


def test_ut1_minus_utc_matches_astropy_inside_and_outside_the_table():
    tab = eo.eop_table()
    rng = np.random.default_rng(1)
    mjd = np.r_[rng.uniform(tab.first_mjd - 2000, tab.last_mjd + 3000, 400),
                tab.first_mjd, tab.last_mjd, tab.last_mjd - 0.5,
                57753.0 + np.linspace(0.0, 0.999, 7), 57754.0]      # around a leap second
    ours_t, theirs_t = _utc(mjd)
    # source: astropy 8.0 Time.delta_ut1_utc with the bundled IERS table
    expected = theirs_t.delta_ut1_utc
    assert np.max(np.abs(eo.ut1_minus_utc_s(ours_t) - expected)) < 1e-12


def test_ut1_minus_utc_jumps_by_one_second_at_the_2016_leap_second():
    # source: IERS Bulletin C 52 - a positive leap second at the end of
    # 2016 December 31 (MJD 57753), so UT1-UTC rises by 1 s at MJD 57754.0.
    before, _ = _utc([57753.0 + 86399.0 / 86400.0])
    after, _ = _utc([57754.0])
    jump = eo.ut1_minus_utc_s(after)[0] - eo.ut1_minus_utc_s(before)[0]
    assert abs(jump - 1.0) < 0.01


def test_ut1_two_part_date_matches_astropy_ut1_including_a_leap_second_day():
    mjd = np.r_[57753.0 + np.array([0.0, 0.3, 0.7, 0.99]), 55000.25, 60000.8]
    ours_t, theirs_t = _utc(mjd)
    jd1, jd2 = eo.ut1_jd(ours_t)
    ut1 = theirs_t.ut1          # source: astropy 8.0 Time.ut1 (erfa.utcut1)
    assert np.max(np.abs((jd1 - ut1.jd1) + (jd2 - ut1.jd2))) * 86400.0 < 1e-9


def test_polar_motion_matches_astropy_table_and_mean_pole_outside():
    from astropy.coordinates.builtin_frames.utils import get_polar_motion
    tab = eo.eop_table()
    rng = np.random.default_rng(2)
    inside = rng.uniform(tab.first_mjd + 1, tab.last_mjd - 1, 300)
    outside = np.r_[tab.first_mjd - 10.3, tab.last_mjd, tab.last_mjd + 400.7]
    ours_t, theirs_t = _utc(np.r_[inside, outside])
    xp, yp = eo.polar_motion_rad(ours_t)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")   # astropy warns about the out-of-range ones
        # source: astropy 8.0 coordinates get_polar_motion (what get_gcrs_posvel uses)
        ref_x, ref_y = get_polar_motion(theirs_t)
    assert np.max(np.abs(xp - ref_x)) * RAD_TO_UAS < 1e-6
    assert np.max(np.abs(yp - ref_y)) * RAD_TO_UAS < 1e-6
    # inside the table the values are the table's own interpolation, too
    # source: astropy 8.0 IERS_Auto.pm_xy
    pole_x, pole_y = iers.IERS_Auto.open().pm_xy(theirs_t[:300])
    assert np.max(np.abs(xp[:300] - pole_x.to_value("rad"))) * RAD_TO_UAS < 1e-6
    assert np.max(np.abs(yp[:300] - pole_y.to_value("rad"))) * RAD_TO_UAS < 1e-6
    # outside: the IERS 50-year mean pole (0.035", 0.29"), astropy's default
    assert np.allclose(np.r_[xp[300:], yp[300:]] * RAD_TO_UAS / 1e6,
                       [0.035] * 3 + [0.29] * 3, atol=1e-12)


def test_eop_values_are_the_single_lookups_together():
    t, _ = _utc(np.random.default_rng(3).uniform(45000, 63000, 200))
    dut1, xp, yp = eo.eop_values(t)
    assert np.array_equal(dut1, eo.ut1_minus_utc_s(t))
    assert np.array_equal(xp, eo.polar_motion_rad(t)[0])
    assert np.array_equal(yp, eo.polar_motion_rad(t)[1])


def test_polar_motion_is_of_the_known_size():
    # source: IERS Conventions 2010 ch. 5 - the pole wanders within about
    # 0.6" of the reference pole (from memory: Chandler + annual wobble, drift).
    t, _ = _utc(np.linspace(45000, 60000, 500))
    xp, yp = eo.polar_motion_rad(t)
    assert np.all(np.hypot(xp, yp) * RAD_TO_UAS / 1e6 < 0.8)
    assert np.ptp(xp) * RAD_TO_UAS / 1e6 > 0.2       # it does move


def test_wrong_scale_is_refused():
    t = SplitTime([58000.0], [0.5], "tt")
    with pytest.raises(ValueError, match="UTC"):
        eo.ut1_minus_utc_s(t)
    with pytest.raises(ValueError, match="TT"):
        eo.cip_xys(SplitTime([58000.0], [0.5], "utc"))


def test_coverage_warnings_beyond_the_table():
    tab = eo.eop_table()
    inside = np.linspace(51544.0, tab.predicted_from_mjd - 1.0, 20)
    t, _ = _utc(inside)
    assert eo.coverage_warnings(t) == []
    t, _ = _utc(np.r_[inside, tab.last_mjd + 10.0, tab.last_mjd + 2000.0, tab.last_mjd + 1.5])
    found = eo.coverage_warnings(t)
    assert len(found) == 1
    text = found[0]
    assert "3 of 23 TOAs" in text and "beyond" in text
    assert f"MJD {tab.first_mjd:.0f} to {tab.last_mjd:.0f}" in text     # states the span
    assert "held" in text and "mean" in text                             # what is done
    assert "46 m" in text                                                # what it costs


def test_coverage_warnings_before_the_table_and_in_the_forecast():
    tab = eo.eop_table()
    t, _ = _utc([tab.first_mjd - 100.0, tab.predicted_from_mjd + 1.0, tab.predicted_from_mjd + 2.0])
    found = eo.coverage_warnings(t)
    assert any("1 of 3 TOAs lie before" in w for w in found)
    assert any("2 of 3 TOAs fall in the forecast" in w for w in found)


def test_coverage_warnings_never_raise_on_odd_input():
    assert eo.coverage_warnings(SplitTime(np.empty(0), np.empty(0), "utc")) == []
    assert len(eo.coverage_warnings(SplitTime([1.0e6], [0.0], "utc"))) == 1


def _tt(mjd):
    mjd = np.asarray(mjd, dtype=float)
    day = np.floor(mjd)
    return SplitTime(day, mjd - day, "tt")


def test_isolated_times_are_evaluated_exactly():
    mjd = np.random.default_rng(8).uniform(51544.0, 66154.0, 25)
    x, y, s = eo.cip_xys(_tt(mjd))
    # source: erfa.xys06a - few TOAs per interval take the series itself
    assert np.array_equal(np.array([x, y, s]), np.array(erfa.xys06a(2400000.5, mjd)))


def test_cip_matches_erfa_for_dense_sparse_and_session_data():
    rng = np.random.default_rng(4)
    dense = rng.uniform(51544.0, 51544.0 + 120.0, 3000)                 # every day filled
    sessions = (rng.uniform(51544, 66154, 15)[:, None]
                + rng.uniform(0, 0.12, (15, 40))).ravel()                 # 3-hour sessions
    sparse = rng.uniform(51544.0, 66154.0, 40)                           # isolated TOAs
    same = np.full(30, 60001.25)                                         # identical times
    for mjd in (dense, sessions, sparse, same, np.r_[dense, sessions, sparse]):
        x, y, s = eo.cip_xys(_tt(mjd))
        # source: erfa.xys06a (IAU 2006 precession + IAU 2000A nutation)
        ex, ey, es = erfa.xys06a(2400000.5, mjd)
        assert np.max(np.abs(x - ex)) * RAD_TO_UAS < CIP_BOUND_UAS
        assert np.max(np.abs(y - ey)) * RAD_TO_UAS < CIP_BOUND_UAS
        assert np.max(np.abs(s - es)) * RAD_TO_UAS < 0.06


@pytest.mark.parametrize("scheme", eo.CIP_SCHEMES)
def test_every_interpolation_scheme_meets_its_bound(scheme):
    # each scheme forced on full-width intervals crowded with TOAs, so the
    # interpolation (not the direct evaluation) is what gets checked
    width, degree = scheme
    rng = np.random.default_rng(int(width * 8) + degree)
    starts = rng.uniform(51544.0, 66154.0, 6)
    mjd = (starts[:, None] + np.linspace(0.0, width * 0.999, 3 * (degree + 1))[None, :]
           + rng.uniform(0, width * 1e-3, (6, 3 * (degree + 1)))).ravel()
    x, y, _ = eo.cip_xys(_tt(mjd), scheme=scheme)
    ex, ey, _ = erfa.xys06a(2400000.5, mjd)   # source: erfa.xys06a (IAU 2006/2000A)
    assert np.max(np.abs(x - ex)) * RAD_TO_UAS < CIP_BOUND_UAS
    assert np.max(np.abs(y - ey)) * RAD_TO_UAS < CIP_BOUND_UAS


def test_cip_empty_and_order_preserved():
    x, y, s = eo.cip_xys(_tt(np.empty(0)))
    assert x.shape == (0,)
    mjd = np.array([60010.3, 55000.1, 60010.31, 55000.11, 58000.0] * 5)
    x, _, _ = eo.cip_xys(_tt(mjd))
    ex, _, _ = erfa.xys06a(2400000.5, mjd)   # source: erfa.xys06a
    assert np.max(np.abs(x - ex)) * RAD_TO_UAS < CIP_BOUND_UAS


def test_disk_cache_reproduces_the_bundled_table(tmp_path, monkeypatch):
    # The cached arrays must equal a fresh parse of astropy's bundled table exactly.
    import numpy as np
    from timingkit.geometry import earth_orientation as eo
    monkeypatch.setenv("TIMINGKIT_CACHE_DIR", str(tmp_path))
    eo.eop_table.cache_clear()
    try:
        first = eo.eop_table()                    # parses and writes the cache
        assert list(tmp_path.glob("eop-*.npz"))
        eo.eop_table.cache_clear()
        cached = eo.eop_table()                   # reads the cache
        fresh = eo._parse_bundled()
        for name in ("mjd", "ut1_minus_utc_s", "xp_rad", "yp_rad"):
            assert np.array_equal(getattr(cached, name), getattr(fresh, name))
            assert np.array_equal(getattr(first, name), getattr(fresh, name))
        assert cached.predicted_from_mjd == fresh.predicted_from_mjd
    finally:
        eo.eop_table.cache_clear()


def test_one_interpolation_of_the_table_per_data_set(sites, ephemeris, monkeypatch):
    # prepare_observations needs UT1-UTC for TDB and (UT1-UTC, pole) for the
    # site positions: one look-up serves both, and the positions are those of
    # a separate look-up.
    from timingkit.formats.toa_table import ToaTable
    from timingkit.geometry.observations import prepare_observations
    from timingkit.geometry.sites import sites_gcrs_posvel
    mjd = np.linspace(58000.0, 58300.0, 30)
    day = np.floor(mjd)
    names = np.array(["desert-dish", "lake-array", "geocentre"] * 10)
    toas = ToaTable.from_arrays(day, mjd - day, np.ones(30), np.full(30, 1400.0), names)
    calls = []
    original = eo._interp_rows
    monkeypatch.setattr(eo, "_interp_rows", lambda *a: calls.append(1) or original(*a))
    obs = prepare_observations(toas, sites, ephemeris)
    assert len(calls) == 1
    earth = names != "geocentre"
    unique, index = sites.resolve_many(names[earth])
    utc = SplitTime(day[earth], (mjd - day)[earth], "utc")
    from timingkit.geometry.timescales import utc_to_tt
    pos, _ = sites_gcrs_posvel(unique, index, utc, utc_to_tt(utc))
    earth_pos, _ = ephemeris.posvel("earth", obs.tdb[earth])
    # (1e-4 m: the rounding of 1.5e11-m barycentric vectors)
    assert np.max(np.abs(obs.observer_ssb_m[earth] - earth_pos - pos)) < 1e-4


def test_cip_nodes_are_cached_between_runs_with_identical_results(tmp_path, monkeypatch):
    # Dense data: the first run evaluates erfa.xys06a at the nodes of the 32-day
    # intervals it needs (about 0.8 per day) and stores them; a later run (here a new
    # cache object reading the file) evaluates nothing and gives the same numbers.
    from unittest import mock
    from timingkit.numerics.chebyshev_grid import NodeCache
    monkeypatch.setenv("TIMINGKIT_CACHE_DIR", str(tmp_path))
    mjd = np.random.default_rng(9).uniform(58000.0, 58000.0 + 365.0, 20000)
    real = erfa.xys06a
    results = []
    for run in range(3):
        cache = NodeCache(eo.CIP_NODE_CACHE.name, eo.CIP_NODE_CACHE.width,
                          eo.CIP_NODE_CACHE.degree)
        monkeypatch.setattr(eo, "CIP_NODE_CACHE", cache)
        calls = []

        def counting(d1, d2):
            calls.append(np.size(d2))
            return real(d1, d2)

        with mock.patch.object(eo.erfa, "xys06a", counting):
            results.append(np.array(eo.cip_xys(_tt(mjd))))
        if run == 0:
            assert 0 < sum(calls) <= 13 * 26          # 12-13 intervals of 26 nodes
        else:
            assert sum(calls) == 0
        if run == 1:       # a damaged file is ignored and rewritten
            cache.path and open(cache.path, "wb").write(b"not an npz")
            monkeypatch.setattr(eo, "CIP_NODE_CACHE", NodeCache(cache.name, cache.width,
                                                                cache.degree))
            with mock.patch.object(eo.erfa, "xys06a", counting):
                results.append(np.array(eo.cip_xys(_tt(mjd))))
    assert all(np.array_equal(results[0], r) for r in results[1:])
    ex, ey, _ = erfa.xys06a(2400000.5, mjd)      # source: erfa.xys06a (IAU 2006/2000A)
    assert np.max(np.abs(results[0][0] - ex)) * RAD_TO_UAS < CIP_BOUND_UAS
    assert np.max(np.abs(results[0][1] - ey)) * RAD_TO_UAS < CIP_BOUND_UAS
