"""Sites: the table, site files, geodetic coordinates, GCRS position/velocity.

References: astropy EarthLocation.get_gcrs_posvel (bundled IERS table,
downloads off); erfa gd2gc/gc2gd (WGS84); the WGS 84 definition
(NIMA TR8350.2: a = 6378137 m, 1/f = 298.257223563); IERS Conventions 2010.
All sites here are invented.
"""

import math
import warnings
from pathlib import Path

import astropy.units as u
import erfa
import numpy as np
import pytest
from astropy.coordinates import EarthLocation
from astropy.time import Time
from astropy.utils import iers

from timingkit.formats.errors import InputError
from timingkit.formats.site_file import GEOCENTRE, SSB, Site, load_site_file
from timingkit.geometry.sites import SiteTable, site_gcrs_posvel, sites_gcrs_posvel
from timingkit.numerics.timearray import SplitTime

# Invented sites, each more than 200 km from any real radio or gamma-ray
# observatory: a mid-latitude one given by its ITRF vector (the sample
# desert-dish: erfa.gd2gc of 104.62 E, 43.87 N, 1420 m), a far-northern
# one on an Arctic ice shelf and a southern one given geodetically.
SITE_FILE = """\
# invented sites for the tests
[site.desert-dish]
geocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]
other_names = ["dd", "Desert"]
coordinates_from = "invented for the tests"

[site.ice-shelf]
longitude_deg = -80.5
latitude_deg = 82.6
height_m = 40.0

[site.south-bowl]
longitude_deg = -70.25
latitude_deg = -41.75
height_m = 2210.5
other_names = ["sb"]
"""


@pytest.fixture
def site_file(tmp_path):
    path = tmp_path / "sites.toml"
    path.write_text(SITE_FILE)
    return path


@pytest.fixture
def table(site_file):
    return SiteTable.with_files([site_file])


@pytest.fixture
def astropy_holds_values_offline():
    # With downloads off, astropy refuses forecast-range UT1 once its bundled
    # table is older than auto_max_age; None makes it hold values, as we do.
    old = iers.conf.auto_max_age
    iers.conf.auto_max_age = None
    yield
    iers.conf.auto_max_age = old


def _times(mjd):
    mjd = np.asarray(mjd, dtype=float)
    day = np.floor(mjd)
    t = Time(day, mjd - day, format="mjd", scale="utc")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)   # "dubious year" past the leap table
        tt = t.tt
    return (t, SplitTime(day, mjd - day, "utc"),
            SplitTime(tt.jd1 - 2400000.5, tt.jd2, "tt").normalized())


# ---------------------------------------------------------------------------
# GCRS position and velocity

def _test_epochs():
    rng = np.random.default_rng(11)
    random = rng.uniform(51544.0, 51544.0 + 40 * 365.25, 300)            # 2000-2040
    sessions = (rng.uniform(52000, 65000, 4)[:, None]
                + rng.uniform(0.0, 0.12, (4, 50))).ravel()                # 3-hour sessions
    dense = rng.uniform(58000.0, 58040.0, 200)                            # every day filled
    return random, np.r_[sessions, dense]


@pytest.mark.parametrize("name", ["desert-dish", "ice-shelf", "south-bowl"])
def test_gcrs_posvel_matches_astropy(table, name, astropy_holds_values_offline):
    site = table.lookup(name)
    loc = EarthLocation.from_geocentric(*site.geocentric_itrf_m, unit=u.m)
    isolated, crowded = _test_epochs()
    # Isolated times take the precession-nutation series itself: only rounding
    # separates us from astropy. Crowded times are interpolated (budget
    # 0.75 mm per pole coordinate, so < 1.1 mm in all).
    for epochs, pos_limit_m in ((isolated, 1e-5), (crowded, 1.5e-3)):
        t, utc, tt = _times(epochs)
        pos, vel = site_gcrs_posvel(site, utc, tt)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")          # astropy: "times after IERS data"
            # source: astropy 8.0 EarthLocation.get_gcrs_posvel (bundled IERS)
            ref_pos, ref_vel = loc.get_gcrs_posvel(t)
        dpos = np.linalg.norm(pos - ref_pos.xyz.to_value(u.m).T, axis=1)
        dvel = np.linalg.norm(vel - ref_vel.xyz.to_value(u.m / u.s).T, axis=1)
        # Required: 3 cm and 1 mm/s.
        assert dpos.max() < pos_limit_m
        assert dvel.max() < 1e-6


def test_gcrs_posvel_keeps_length_and_spins_at_the_earth_rate(table):
    # source: IERS Conventions 2010 eq. 5.15 - the Earth rotation angle grows
    # at 2 pi x 1.00273781191135448 per UT1 day; rotations keep lengths.
    site = table.lookup("south-bowl")
    _, utc, tt = _times(np.linspace(55000.0, 56000.0, 400))
    pos, vel = site_gcrs_posvel(site, utc, tt)
    radius = np.linalg.norm(site.geocentric_itrf_m)
    assert np.allclose(np.linalg.norm(pos, axis=1), radius, rtol=1e-12, atol=0)
    omega = 2 * math.pi * 1.00273781191135448 / 86400.0
    speed = np.linalg.norm(vel, axis=1)
    # the pole offset (< 1", plus precession-nutation of the axis is in GCRS)
    # changes the distance from the axis by < 30 m of 4.8e6 m
    assert np.allclose(speed, omega * site.spin_axis_distance_km * 1000.0, rtol=1e-5)
    assert np.allclose(np.einsum("ij,ij->i", pos, vel), 0.0, atol=1e-3 * radius * 1e-4)


def test_geocenter_is_zero_and_ssb_is_refused():
    _, utc, tt = _times([58000.5, 58001.5])
    pos, vel = site_gcrs_posvel(GEOCENTRE, utc, tt)
    assert np.all(pos == 0.0) and np.all(vel == 0.0) and pos.shape == (2, 3)
    with pytest.raises(ValueError, match="ssb"):
        site_gcrs_posvel(SSB, utc, tt)


def test_time_arguments_are_checked(table):
    site = table.lookup("dd")
    _, utc, tt = _times([58000.5, 58001.5])
    with pytest.raises(ValueError, match="scale 'tt'"):
        site_gcrs_posvel(site, utc, utc)
    with pytest.raises(ValueError, match="scale 'utc'"):
        site_gcrs_posvel(site, tt, tt)
    with pytest.raises(ValueError, match="length"):
        site_gcrs_posvel(site, utc, tt[:1])


def test_many_sites_at_once_equal_one_at_a_time(table):
    rng = np.random.default_rng(5)
    names = rng.choice(np.array(["dd", "ice-shelf", "geocentre", "sb", "desert-dish"]), 300)
    _, utc, tt = _times(rng.uniform(53000.0, 60000.0, 300))
    sites, index = table.resolve_many(names)
    pos, vel = sites_gcrs_posvel(sites, index, utc, tt)
    for k, site in enumerate(sites):
        rows = np.flatnonzero(index == k)
        p1, v1 = site_gcrs_posvel(site, utc[rows], tt[rows])
        assert np.max(np.abs(pos[rows] - p1)) < 1e-6 and np.max(np.abs(vel[rows] - v1)) < 1e-9
    assert np.all(pos[names == "geocentre"] == 0.0)
    with pytest.raises(ValueError, match="ssb"):
        sites_gcrs_posvel([SSB, GEOCENTRE], np.array([1, 0]), utc[:2], tt[:2])


# ---------------------------------------------------------------------------
# Geodetic coordinates

def test_geodetic_and_itrf_round_trip_against_erfa(table):
    for name in ("ice-shelf", "south-bowl"):
        site = table.lookup(name)
        lon, lat, height = {"ice-shelf": (-80.5, 82.6, 40.0),
                            "south-bowl": (-70.25, -41.75, 2210.5)}[name]
        # source: erfa.gd2gc (WGS84), the conversion the file promises
        expected = erfa.gd2gc(1, math.radians(lon), math.radians(lat), height)
        assert np.allclose(site.geocentric_itrf_m, expected, rtol=0, atol=1e-9)
        assert abs(site.longitude_rad - math.radians(lon)) < 1e-12
        assert abs(site.latitude_rad - math.radians(lat)) < 1e-12
        assert abs(site.height_m - height) < 1e-6
    site = table.lookup("desert-dish")
    # source: erfa.gc2gd (WGS84)
    elong, phi, height = erfa.gc2gd(1, site.geocentric_itrf_m)
    assert (site.longitude_rad, site.latitude_rad, site.height_m) == (elong, phi, height)


def test_wgs84_axes_from_the_definition(tmp_path):
    # source: NIMA TR8350.2 (WGS 84): a = 6378137 m, 1/f = 298.257223563,
    # so the polar radius b = a (1 - f) = 6356752.3142 m.
    path = tmp_path / "axes.toml"
    path.write_text("[site.equator-zero]\nlongitude_deg = 0\nlatitude_deg = 0\nheight_m = 0\n"
                    "[site.north-pole]\nlongitude_deg = 0\nlatitude_deg = 90\nheight_m = 0\n")
    equator, pole = load_site_file(path)
    assert np.allclose(equator.geocentric_itrf_m, [6378137.0, 0.0, 0.0], atol=1e-6)
    b = 6378137.0 * (1 - 1 / 298.257223563)
    assert abs(pole.geocentric_itrf_m[2] - b) < 1e-6 and abs(b - 6356752.3142) < 1e-4
    # u, v of erfa.dtdb (SOFA: distance from the spin axis / north of the
    # equatorial plane, km)
    assert equator.spin_axis_distance_km == pytest.approx(6378.137, abs=1e-9)
    assert equator.equator_distance_km == pytest.approx(0.0, abs=1e-9)
    assert pole.spin_axis_distance_km == pytest.approx(0.0, abs=1e-6)
    assert pole.equator_distance_km == pytest.approx(b / 1000.0, abs=1e-9)


def test_builtin_sites_are_the_geocenter_and_the_ssb():
    table = SiteTable()
    assert table.names == ["geocentre", "ssb"]
    geo = table.lookup("geocentre")
    assert geo.kind == "geocentre" and np.all(geo.geocentric_itrf_m == 0.0)
    assert geo.spin_axis_distance_km == 0.0 and geo.equator_distance_km == 0.0
    assert table.lookup("ssb").geocentric_itrf_m is None
    with pytest.raises(ValueError, match="not on the Earth"):
        table.lookup("ssb").latitude_rad
    for site in table:
        assert site.coordinates_from.startswith("definition")


def test_site_values_are_frozen_and_compare_by_value():
    a = Site("demo-one", "earth", [6378137.0, 0.0, 0.0], ("d1",), "invented")
    b = Site("Demo-One", "earth", np.array([6378137.0, 0.0, 0.0]), ("D1",), "invented")
    assert a == b and hash(a) == hash(b) and a.name == "demo-one" and b.other_names == ("d1",)
    with pytest.raises(ValueError):
        a.geocentric_itrf_m[0] = 1.0
    with pytest.raises(ValueError, match="kind"):
        Site("x", "moon", [1.0, 2.0, 3.0])
    with pytest.raises(ValueError, match="3 finite"):
        Site("x", "earth", [1.0, 2.0])
    with pytest.raises(ValueError, match="needs geocentric_itrf_m"):
        Site("x", "earth", None)


# ---------------------------------------------------------------------------
# Site files

def test_site_file_reads_both_coordinate_forms_and_sources(site_file):
    sites = {s.name: s for s in load_site_file(site_file)}
    assert set(sites) == {"desert-dish", "ice-shelf", "south-bowl"}
    dd = sites["desert-dish"]
    assert np.array_equal(dd.geocentric_itrf_m, [-1162719.1, 4457368.2, 4398673.9])
    assert dd.other_names == ("dd", "desert") and dd.kind == "earth"
    assert str(site_file) in dd.coordinates_from and "invented for the tests" in dd.coordinates_from
    assert "accuracy not stated" in sites["ice-shelf"].coordinates_from


BAD_FILES = [
    # (file text, field named, words in the message)
    ("# c\n[site.a\ngeocentric_itrf_m = [1, 2, 3]\n", None, "not valid TOML"),
    ("name = 'x'\n", "name", "unknown top-level key"),
    ("site = 3\n", "site", "table"),
    ("site.a = 5\n", "site.a", "must be a table"),
    ("# c\n[site.a]\ngeocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]\ncolour = 'red'\n",
     "site.a.colour", "allowed keys: geocentric_itrf_m"),
    ("# c\n[site.a]\nother_names = ['b']\n", "site.a", "no coordinates"),
    ("# c\n[site.a]\ngeocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]\nlatitude_deg = 3.0\n",
     "site.a.latitude_deg", "either"),
    ("# c\n[site.a]\nlongitude_deg = 3.0\nlatitude_deg = 4.0\n", "site.a.height_m", "lacks"),
    ("# c\n[site.a]\ngeocentric_itrf_m = ['-1162719.1', 4457368.2, 4398673.9]\n",
     "site.a.geocentric_itrf_m", "must be a number"),
    ("# c\n[site.a]\ngeocentric_itrf_m = [-1162719.1, 4457368.2]\n", "site.a.geocentric_itrf_m", "3 numbers"),
    ("# c\n[site.a]\ngeocentric_itrf_m = 4398673.9\n", "site.a.geocentric_itrf_m", "3 numbers"),
    ("# c\n[site.a]\nlongitude_deg = 3.0\nlatitude_deg = 4.0\nheight_m = true\n",
     "site.a.height_m", "must be a number"),
    ("# c\n[site.a]\nlongitude_deg = '12d'\nlatitude_deg = 4.0\nheight_m = 1.0\n",
     "site.a.longitude_deg", "must be a number"),
    ("# c\n[site.a]\nlongitude_deg = 3.0\nlatitude_deg = nan\nheight_m = 1.0\n",
     "site.a.latitude_deg", "finite"),
    ("# c\n[site.a]\nlongitude_deg = 3.0\nlatitude_deg = 95.0\nheight_m = 1.0\n",
     "site.a.latitude_deg", "-90..90"),
    ("# c\n[site.a]\nlongitude_deg = 3.0\nlatitude_deg = 9.0\nheight_m = 1.4e6\n",
     "site.a.height_m", "metres above"),
    ("# c\n[site.a]\ngeocentric_itrf_m = [-1162.7191, 4457.3682, 4398.6739]\n",
     "site.a.geocentric_itrf_m", "not kilometres"),
    ("# c\n[site.a]\ngeocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]\nother_names = 'b'\n",
     "site.a.other_names", "list of names"),
    ("# c\n[site.a]\ngeocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]\nother_names = ['b c']\n",
     "site.a.other_names", "plain site name"),
    ("# c\n[site.a]\ngeocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]\ncoordinates_from = 5\n",
     "site.a.coordinates_from", "text"),
    ("# c\n[site.\"two words\"]\ngeocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]\n",
     "site.two words", "plain site name"),
    ("[site.a]\ngeocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]\nother_names = ['x']\n"
     "# c\n[site.b]\ngeocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]\nother_names = ['x']\n",
     "site.b", "already used by site a"),
]


@pytest.mark.parametrize("text, field, words", BAD_FILES)
def test_bad_site_files_name_file_site_and_key(tmp_path, text, field, words):
    path = tmp_path / "bad-sites.toml"
    path.write_text(text)
    with pytest.raises(InputError) as caught:
        load_site_file(path)
    err = caught.value
    assert err.path == str(path) and str(path) in str(err)
    assert words in str(err)
    assert err.field == field
    if field is None or "[site." in text and text.startswith("# c\n[site."):
        assert err.line == 2        # the header line of the site at fault (or TOML's own line)


def test_missing_site_file_and_clash_with_a_builtin(tmp_path):
    with pytest.raises(InputError) as caught:
        load_site_file(tmp_path / "nowhere.toml")
    assert "nowhere.toml" in str(caught.value) and "site file not found" in str(caught.value)
    path = tmp_path / "clash.toml"
    path.write_text("[site.demo-x]\ngeocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]\n"
                    "other_names = ['Barycentre']\n")
    with pytest.raises(InputError) as caught:
        SiteTable.with_files([path])
    assert str(path) in str(caught.value) and "barycentre" in str(caught.value)
    assert "ssb" in str(caught.value)


def test_two_files_may_not_define_one_site_twice(tmp_path, site_file):
    other = tmp_path / "more.toml"
    other.write_text("[site.DD]\ngeocentric_itrf_m = [-1162719.1, 4457368.2, 4398673.9]\n")
    with pytest.raises(InputError) as caught:
        SiteTable.with_files([site_file, other])
    assert str(other) in str(caught.value) and "desert-dish" in str(caught.value)


# ---------------------------------------------------------------------------
# Look-ups

def test_lookup_by_alias_in_any_case(table):
    dd = table.lookup("desert-dish")
    for name in ("DD", " dd ", "Desert-Dish", "desert", "DESERT"):
        assert table.lookup(name) is dd
    assert "SB" in table and "nowhere" not in table
    assert table.lookup("Barycentre").kind == "ssb"
    assert table.lookup("geocentre").kind == "geocentre"


def test_unknown_site_lists_the_known_names(table):
    with pytest.raises(InputError) as caught:
        table.lookup("far-hill")
    message = str(caught.value)
    assert "far-hill" in message and caught.value.field == "site"
    for name in ("geocentre", "ssb", "desert-dish", "ice-shelf", "south-bowl", "dd", "sb"):
        assert name in message


def test_resolve_many_maps_names_to_shared_sites(table):
    rng = np.random.default_rng(9)
    pool = np.array(["dd", "desert-dish", "DESERT", "ice-shelf", "ssb", "sb", "geocentre"])
    names = rng.choice(pool, 50_000)
    sites, index = table.resolve_many(names)
    assert len(sites) == 5                         # three spellings of desert-dish are one
    assert len({s.name for s in sites}) == 5
    for label in pool:
        rows = names == label
        assert {sites[i].name for i in index[rows]} == {table.lookup(label).name}
    sites, index = table.resolve_many(list(names[:10]))   # plain lists too
    assert [sites[i] for i in index] == [table.lookup(n) for n in names[:10]]
    with pytest.raises(InputError, match="far-hill"):
        table.resolve_many(np.array(["dd", "far-hill"]))


def test_sample_sites_lie_at_plausible_heights():
    # Every invented sample site (sample_data/sites.toml) at a geodetic height
    # between -100 m and 5,000 m: land surfaces lie within that range of the
    # WGS84 ellipsoid almost everywhere (a vector typed wrong by a few km
    # would put a site underground or in the air).
    path = Path(__file__).resolve().parents[1] / "sample_data" / "sites.toml"
    sites = load_site_file(path)
    assert len(sites) >= 3
    assert any(s.geocentric_itrf_m[2] < 0 for s in sites)      # both hemispheres
    for site in sites:
        assert -100.0 <= site.height_m <= 5000.0, (site.name, site.height_m)
