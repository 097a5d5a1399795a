"""TDB and Roemer delay per TOA against astropy (an independent general-purpose
library), through the project's own path from a TOA table to the delays."""

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import (EarthLocation, SkyCoord, get_body_barycentric_posvel,
                                 solar_system_ephemeris)
from astropy.time import Time
from astropy.utils import iers

from timingkit.geometry.ephemeris import builtin_ephemeris_path
from timingkit.model import TimingModel
from timingkit.geometry.observations import prepare_observations
from timingkit.formats.toa_table import ToaTable

iers.conf.auto_download = False
iers.conf.auto_max_age = None   # the bundled table, as offline users have it
iers.conf.iers_degraded_accuracy = "warn"

C = 299792458.0
DIRECTIONS = [("11h53m40.0s", "+00d47m12.0s"), ("13h21m09.47s", "+41d06m38.2s"),
              ("00h01m02.0s", "+89d10m00.0s"), ("12h30m00.0s", "-60d00m00.0s")]


def _model(ra, dec):
    return TimingModel.from_text(f'''
[position]
ra = "{ra}"
dec = "{dec}"
[spin]
epoch_mjd = "58000"
frequency_hz = "100"
''')


@pytest.mark.parametrize("site_name", ["desert-dish", "lake-array", "north-ridge"])
def test_tdb_and_roemer_match_astropy_2000_2040(site_name, sites, ephemeris):
    rng = np.random.default_rng(abs(hash(site_name)) % 2 ** 32)
    n = 120
    mjd = np.sort(rng.uniform(51544.0, 51544.0 + 40 * 365.25, n))
    day = np.floor(mjd)
    toas = ToaTable.from_arrays(day, mjd - day, np.ones(n), np.full(n, np.inf),
                            np.full(n, site_name))
    obs = prepare_observations(toas, sites, ephemeris)
    site = sites.lookup(site_name)
    loc = EarthLocation.from_geocentric(*site.geocentric_itrf_m, unit=u.m)
    # astropy: Time.tdb with the location (erfa.dtdb with topocentric terms)
    t = Time(toas.mjd_day, toas.mjd_frac, format="mjd", scale="utc", location=loc)
    tdb = t.tdb
    # difference formed part by part so float64 keeps ps resolution
    diff_s = ((tdb.jd1 - 2400000.5) - obs.tdb.day) * 86400.0 + (tdb.jd2 - obs.tdb.frac) * 86400.0
    assert np.max(np.abs(diff_s)) < 1e-9
    # astropy's geometry: Earth from the same DE421 file at TDB + the site's GCRS vector
    with solar_system_ephemeris.set(builtin_ephemeris_path()):
        earth_pos, earth_vel = get_body_barycentric_posvel("earth", tdb)
    site_pos = loc.get_gcrs_posvel(t)[0].xyz.to_value(u.m).T
    observer = earth_pos.xyz.to_value(u.m).T + site_pos
    # astropy's Time.light_travel_time goes ITRS -> GCRS -> ICRS, which treats the
    # site's geocentric vector like an apparent direction and removes first-order
    # aberration from it (up to ~2 µs). That term, computed here, is the whole
    # difference between light_travel_time and the geometric delay (checked below).
    v_over_c = earth_vel.xyz.to_value(u.m / u.s).T / C
    r_len = np.linalg.norm(site_pos, axis=1)[:, None]
    r_hat = site_pos / r_len
    aberration_shift = r_len * (-v_over_c + np.sum(r_hat * v_over_c, axis=1)[:, None] * r_hat)
    for ra, dec in DIRECTIONS:
        model = _model(ra, dec)
        ev = model.evaluate(obs)
        c = SkyCoord(ra, dec, frame="icrs")
        n_hat = c.cartesian.xyz.value
        geometric = observer @ n_hat / C
        assert np.max(np.abs(ev.roemer_s - geometric)) < 1e-9, (ra, dec)
        ltt = t.light_travel_time(c, kind="barycentric", location=loc,
                                  ephemeris=builtin_ephemeris_path()).to_value(u.s)
        assert np.max(np.abs(ev.roemer_s + aberration_shift @ n_hat / C - ltt)) < 1e-9, (ra, dec)


def test_geocenter_and_ssb_sites(sites, ephemeris):
    # geocentre: TT given, TDB = TT + erfa.dtdb at the geocentre (astropy, no location);
    # ssb: the times are already TDB at the barycentre, with no geometric delays.
    mjd = np.array([55000.25, 58000.75])
    day = np.floor(mjd)
    toas = ToaTable.from_arrays(day, mjd - day, [1.0, 1.0], [1400.0, np.inf], ["geocentre", "ssb"])
    obs = prepare_observations(toas, sites, ephemeris)
    tt = Time(day[0], mjd[0] - day[0], format="mjd", scale="tt")
    diff_s = ((tt.tdb.jd1 - 2400000.5) - obs.tdb.day[0]) * 86400 + (tt.tdb.jd2 - obs.tdb.frac[0]) * 86400
    assert abs(diff_s) < 1e-9
    assert obs.tdb.day[1] == 58000.0 and obs.tdb.frac[1] == 0.75
    ev = _model(*DIRECTIONS[0]).evaluate(obs)
    assert ev.roemer_s[1] == 0.0 and ev.shapiro_s[1] == 0.0
    assert 1 < abs(ev.roemer_s[0]) < 500.5
