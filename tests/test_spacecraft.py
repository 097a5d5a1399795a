"""Spacecraft observers: orbit tables (text and FITS), their interpolation and
its stated error against an orbit computed by hand, coverage, and TDB at the
spacecraft against ERFA's topocentric series."""

import erfa
import numpy as np
import pytest

from events_support import circular_orbit_state, write_orbit
from timingkit.formats.errors import InputError
from timingkit.formats.orbit_table import read_orbit_table
from timingkit.formats.site_file import Site
from timingkit.geometry import earth_orientation, timescales
from timingkit.geometry.sites import site_gcrs_posvel
from timingkit.geometry.spacecraft import SpacecraftTrajectory, spacecraft_tdb
from timingkit.numerics.timearray import SplitTime

START = 58000.0


def _times(seconds):
    return SplitTime(np.full(len(seconds), START), np.asarray(seconds) / 86400.0, "tt")


@pytest.mark.parametrize("velocities, step_s", [(True, 60.0), (True, 120.0), (False, 30.0)])
def test_interpolation_error_is_stated_honestly(tmp_path, velocities, step_s):
    path = write_orbit(tmp_path / "orbit.txt", START, START + 0.3, step_s, velocities)
    trajectory = SpacecraftTrajectory(read_orbit_table(path))
    assert trajectory.method == ("cubic Hermite" if velocities else "cubic spline")
    seconds = np.linspace(0.0, 0.3 * 86400, 40000)      # the whole table (a spline's worst
                                                         # error lies near its ends)
    pos, vel = trajectory.posvel(_times(seconds))
    true_pos, true_vel = circular_orbit_state(seconds)
    error = np.max(np.linalg.norm(pos - true_pos, axis=1))
    # the halving estimate (a h^4 scaling argument, doubled) must bound the error
    # without exaggerating it grossly
    assert error <= trajectory.interpolation_error_m < 3 * error
    assert np.max(np.linalg.norm(vel - true_vel, axis=1)) < 1e-3 * 7600 * (step_s / 60) ** 3


def test_fits_orbit_table_in_kilometres(tmp_path):
    from astropy.io import fits
    seconds = np.arange(0.0, 3600.0, 60.0)
    pos, vel = circular_orbit_state(seconds)
    cols = [fits.Column("TIME", "D", unit="s", array=seconds)]
    cols += [fits.Column(n, "D", unit="km", array=pos[:, i] / 1e3) for i, n in enumerate("XYZ")]
    cols += [fits.Column("V" + n, "D", unit="km/s", array=vel[:, i] / 1e3)
             for i, n in enumerate("XYZ")]
    hdu = fits.BinTableHDU.from_columns(cols, name="ORBIT")
    hdu.header.update({"MJDREFI": 58000, "MJDREFF": 0.0, "TIMESYS": "TT"})
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(tmp_path / "orbit.fits")
    table = read_orbit_table(tmp_path / "orbit.fits")
    assert np.allclose(table.position_m, pos, atol=1e-6)
    assert np.allclose(table.velocity_m_per_s, vel, atol=1e-9)
    assert table.times.scale == "tt" and table.times.day[0] == 58000


@pytest.mark.parametrize("edit, field", [
    (lambda lines: lines[:1] + [lines[1].replace(" vz_m_per_s", "")]
     + [r.rsplit(" ", 1)[0] for r in lines[2:]], "vz_m_per_s"),
    (lambda lines: [lines[0], lines[1]] + [lines[3], lines[2]] + lines[4:], "mjd"),
    (lambda lines: lines[1:], "scale"),
    (lambda lines: lines[:2] + [_in_km(r) for r in lines[2:]], "x_m"),
])
def test_orbit_table_errors(tmp_path, edit, field):
    lines = write_orbit(tmp_path / "o.txt", START, START + 0.1, 60.0).read_text().splitlines()
    (tmp_path / "bad.txt").write_text("\n".join(edit(lines)) + "\n")
    with pytest.raises(InputError) as err:
        read_orbit_table(tmp_path / "bad.txt")
    assert err.value.field == field


def _in_km(row):
    mjd, *values = row.split()
    return " ".join([mjd] + [f"{float(v) / 1e3:.6f}" for v in values])


def test_times_outside_the_table_are_an_error(tmp_path):
    path = write_orbit(tmp_path / "orbit.txt", START, START + 0.1, 60.0)
    trajectory = SpacecraftTrajectory(read_orbit_table(path))
    trajectory.check_covers(_times([10.0, 8000.0]))
    with pytest.raises(InputError, match="outside the orbit table") as err:
        trajectory.check_covers(_times([10.0, 0.1 * 86400 + 61.0]))
    assert err.value.path == str(path)


def test_spacecraft_tdb_matches_erfa_topocentric_terms(ephemeris):
    # For a point on the Earth, TDB - TT from the spacecraft rule (geocentric
    # series + v_E . r / c^2, r from our GCRS site position) must agree with
    # erfa.dtdb's own topocentric terms (SOFA iauDtdb, Moyer 1981), which expand
    # the same term: < 2 ns over 20 years (measured 0.8 ns).
    xyz = erfa.gd2gc(1, np.radians(12.5), np.radians(24.0), 600.0)   # invented site
    site = Site("dune-array", "earth", xyz)
    rng = np.random.default_rng(4)
    mjd = np.sort(rng.uniform(51544.0, 51544.0 + 20 * 365.25, 1500))
    utc = SplitTime(np.floor(mjd), mjd - np.floor(mjd), "utc")
    tt = timescales.utc_to_tt(utc)
    pos, _ = site_gcrs_posvel(site, utc, tt)
    ut1 = np.mod(utc.frac + earth_orientation.ut1_minus_utc_s(utc) / 86400.0, 1.0)
    reference = timescales.tt_to_tdb(tt, ut1, site.longitude_rad, site.spin_axis_distance_km,
                                     site.equator_distance_km)
    ours = spacecraft_tdb(tt, pos, ephemeris)
    diff_s = ((ours.day - reference.day) + (ours.frac - reference.frac)) * 86400.0
    assert np.max(np.abs(diff_s)) < 2e-9
    # and the term itself is there: ~2 µs at the surface
    geocentric = timescales.tt_to_tdb(tt, tt.frac)
    term = ((ours.day - geocentric.day) + (ours.frac - geocentric.frac)) * 86400.0
    assert 1.5e-6 < np.max(np.abs(term)) < 2.2e-6
