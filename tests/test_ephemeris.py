"""Ephemeris reader against JPL's published test values and orbital facts."""

import os

import numpy as np
import pytest

from timingkit.geometry.ephemeris import load_ephemeris
from timingkit.formats.errors import InputError
from timingkit.numerics.timearray import SplitTime

AU_KM = 149597870.700  # IAU 2012 Resolution B2


def test_jpl_de430_test_position():
    # JPL's DE430 test file (testpo.430): JD 2457082.5, Earth relative to
    # Mercury, x = -0.70753751970303600000 au. The DE430 excerpt ships with
    # skyfield's test data.
    skyfield = pytest.importorskip("skyfield")
    path = os.path.join(os.path.dirname(skyfield.__file__), "tests", "data",
                        "de430-2015-03-02.bsp")
    if not os.path.exists(path):
        pytest.skip("skyfield wheel without its DE430 test excerpt")
    eph = load_ephemeris(path)
    t = SplitTime([57082.0], [0.0], "tdb")  # JD 2457082.5
    x = (eph.position("earth", t) - eph.position("mercury", t))[0, 0] / 1000.0
    assert abs(x / AU_KM - (-0.70753751970303600000)) * AU_KM * 1e6 < 1.0  # < 1 mm


def test_earth_sun_light_time_range_over_a_year():
    # 1 au = 499.004784 s (IAU 2012 B2); eccentricity 0.0167 gives ~490.6-507.4 s.
    eph = load_ephemeris()
    days = np.arange(60000.0, 60366.0, 0.5)
    t = SplitTime(days, np.zeros_like(days), "tdb")
    d = np.linalg.norm(eph.position("earth", t) - eph.position("sun", t), axis=1)
    light_s = d / 299792458.0
    assert 490.4 < light_s.min() < 491.0
    assert 507.0 < light_s.max() < 507.6


def test_two_part_dates_keep_precision():
    # Position at day + fraction must equal the same instant split differently.
    eph = load_ephemeris()
    a = eph.position("earth", SplitTime([59000.0], [0.75], "tdb"))
    b = eph.position("earth", SplitTime([59000.5], [0.25], "tdb"))
    assert np.max(np.abs(a - b)) < 1e-4  # 0.1 mm


def test_outside_span_is_a_clear_error():
    eph = load_ephemeris()
    with pytest.raises(InputError, match="outside the ephemeris span"):
        eph.check_span(SplitTime([80000.0], [0.0], "tdb"), where="x.toas")
    # with the TOA table's line numbers, the first offending lines are named
    times = SplitTime([59000.0, 80000.0, 80001.0, 59001.0, 80002.0], [0.0] * 5, "tdb")
    with pytest.raises(InputError) as err:
        eph.check_span(times, where="x.toas", line_numbers=np.array([3, 4, 5, 6, 8]))
    assert err.value.line == 4 and err.value.field == "mjd"
    assert "3 TOA(s)" in err.value.message and "lines 4, 5, 8" in err.value.message


def test_missing_or_bad_file(tmp_path):
    with pytest.raises(InputError, match="not found"):
        load_ephemeris(str(tmp_path / "nope.bsp"))
    bad = tmp_path / "bad.bsp"
    bad.write_bytes(b"not an spk file" * 100)
    with pytest.raises(InputError, match="SPK"):
        load_ephemeris(str(bad))


@pytest.mark.parametrize("layout", ["dense", "sessions", "single"])
def test_series_summed_by_interval_match_jplephem(layout):
    # source: jplephem's own Segment.compute_and_differentiate (Chebyshev per time) on
    # the same DE421 segments; our interval-by-interval sum must agree to < 1 mm and
    # < 1e-9 m/s for the Earth (two segments) and the Sun.
    rng = np.random.default_rng(5)
    if layout == "dense":
        mjd = np.sort(rng.uniform(51544.0, 51544.0 + 3000.0, 30000))
    elif layout == "sessions":
        mjd = (rng.uniform(45000.0, 65000.0, 40)[:, None] + rng.uniform(0, 0.1, (40, 5))).ravel()
    else:
        mjd = np.array([58000.123456789])
    day = np.floor(mjd)
    tdb = SplitTime(day, mjd - day, "tdb")
    eph = load_ephemeris()
    pos, vel = eph.posvel("earth", tdb)
    ref_pos = np.zeros((3, len(mjd)))
    ref_vel = np.zeros((3, len(mjd)))
    for key in eph._chain(399):
        p, v = eph._segments[key].compute_and_differentiate(tdb.jd1, tdb.jd2)
        ref_pos += p
        ref_vel += v
    assert np.max(np.abs(pos - ref_pos.T * 1e3)) < 1e-3
    assert np.max(np.abs(vel - ref_vel.T * 1e3 / 86400.0)) < 1e-9
    sun = eph._segments[(0, 10)].compute(tdb.jd1, tdb.jd2)
    assert np.max(np.abs(eph.position("sun", tdb) - sun.T * 1e3)) < 1e-3
