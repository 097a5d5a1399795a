"""Planetary Shapiro delay (on by default) against independent computations:
astropy's get_body_barycentric on the same DE421 file, jplephem itself, and
skyfield's table of planetary masses."""

import math

import numpy as np
import pytest

from timingkit.formats.toa_table import ToaTable
from timingkit.geometry import delays
from timingkit.geometry.ephemeris import builtin_ephemeris_path
from timingkit.geometry.shapiro_bodies import PLANETS, retarded_positions
from timingkit.model.timing_model import TimingModel
from timingkit.numerics.timearray import SplitTime

C = 299792458.0
JUPITER_RADIUS_M = 71492e3      # IAU 2015 Resolution B3 nominal equatorial radius
TT_MJD = 58790.25               # an invented epoch, Jupiter well away from the Sun


def _model(ra: str, dec: str, planets) -> TimingModel:
    setting = planets if isinstance(planets, str) else \
        "[" + ", ".join(f'"{p}"' for p in planets) + "]"
    return TimingModel.from_text(f"""name = "invented-grazer"
[position]
ra = "{ra}"
dec = "{dec}"
epoch_mjd = "{TT_MJD}"
[spin]
epoch_mjd = "{TT_MJD}"
frequency_hz = "311.25"
[settings]
shapiro_delay_planets = {setting}
""")


def _geocentre_toa() -> ToaTable:
    day = math.floor(TT_MJD)
    return ToaTable.from_arrays(np.array([float(day)]), np.array([TT_MJD - day]), np.array([1.0]),
                                np.array([np.inf]), np.array(["geocentre"]))


def _astropy_jupiter_geometry():
    """Earth and retarded Jupiter (system barycentre) from astropy on DE421."""
    import astropy.units as u
    from astropy.coordinates import get_body_barycentric
    from astropy.time import Time
    path = builtin_ephemeris_path()
    t = Time(TT_MJD, format="mjd", scale="tt")
    earth = get_body_barycentric("earth", t, ephemeris=path).xyz.to_value(u.m)
    light_time = 0.0
    for _ in range(4):
        jup = get_body_barycentric("jupiter", t - light_time * u.s,
                                   ephemeris=path).xyz.to_value(u.m)
        light_time = np.linalg.norm(jup - earth) / C
    unretarded = get_body_barycentric("jupiter", t, ephemeris=path).xyz.to_value(u.m)
    return earth, jup, unretarded


def test_jupiter_grazing_line_of_sight_matches_astropy(ephemeris, sites):
    from astropy.coordinates import SkyCoord, CartesianRepresentation
    from skyfield.relativity import rmasses
    earth, jup, unretarded = _astropy_jupiter_geometry()
    # a line of sight passing 1.5 Jupiter radii from the planet's centre
    to_jup = jup - earth
    dist = np.linalg.norm(to_jup)
    perp = np.cross(to_jup, [0.0, 0.0, 1.0])
    perp /= np.linalg.norm(perp)
    aim = to_jup + 1.5 * JUPITER_RADIUS_M * perp
    sky = SkyCoord(CartesianRepresentation(*aim), frame="icrs")
    ra = sky.ra.to_string(unit="hourangle", sep="hms", precision=10)
    dec = sky.dec.to_string(unit="deg", sep="dms", precision=9, alwayssign=True)
    # the direction our model reads from that text, re-read by astropy
    back = SkyCoord(ra, dec, frame="icrs")
    n = back.cartesian.xyz.value
    n /= np.linalg.norm(n)

    with_jupiter = _model(ra, dec, ["jupiter"])
    without = _model(ra, dec, "false")
    obs = with_jupiter.prepare_observations(_geocentre_toa(), sites, ephemeris)
    assert list(obs.planet_to_observer_m) == ["jupiter"] and obs.planet_track.bodies == ["jupiter"]
    ours = with_jupiter.evaluate(obs).shapiro_s[0] - without.evaluate(obs).shapiro_s[0]

    # Shapiro delay of a point mass, -2 GM/c^3 ln((|rho| + rho.n)/1 au), rho = planet ->
    # observer (Backer & Hellings 1986), with the Sun/Jupiter-system mass ratio of
    # skyfield's table (an independent source of the mass) and the same 1 au normalisation
    gm_over_c3 = delays.GM_SUN_M3_PER_S2 / rmasses["jupiter"] / C ** 3
    rho = earth - jup
    expected = -2 * gm_over_c3 * math.log((np.linalg.norm(rho) + rho @ n) / delays.AU_M)
    impact = np.linalg.norm(np.cross(rho, n))
    assert 1.4 * JUPITER_RADIUS_M < impact < 1.6 * JUPITER_RADIUS_M
    assert 100e-9 < expected < 200e-9                      # grazing Jupiter: ~0.15 µs
    assert abs(ours - expected) < 1e-11
    # the retardation matters at this level: Jupiter where it is "now" is ~34,000 km off
    rho_now = earth - unretarded
    stale = -2 * gm_over_c3 * math.log((np.linalg.norm(rho_now) + rho_now @ n) / delays.AU_M)
    assert abs(stale - expected) > 5e-9
    assert dist > 4 * delays.AU_M


def test_every_planet_of_the_ephemeris_by_default_and_a_switch_to_turn_them_off(
        ephemeris, sites):
    on = _model("05h10m00s", "+21d00m00s", "true")
    default = TimingModel.from_text("""name = "invented"
[position]
ra = "05h10m00s"
dec = "+21d00m00s"
[spin]
epoch_mjd = "58790"
frequency_hz = "311.25"
""")
    obs = default.prepare_observations(_geocentre_toa(), sites, ephemeris)
    # DE421 holds all seven other planets' system barycentres (NAIF 1, 2, 4-8)
    assert sorted(obs.planet_to_observer_m) == sorted(PLANETS)
    assert default.astrometry.shapiro_planets(obs) == list(PLANETS)
    off = _model("05h10m00s", "+21d00m00s", "false")
    assert off.astrometry.shapiro_planets(obs) == []
    assert "shapiro_delay_planets = false" in _written(off)
    assert "shapiro_delay_planets" not in _written(on)      # the default is not written
    diff = on.evaluate(obs).shapiro_s[0] - off.evaluate(obs).shapiro_s[0]
    assert diff != 0.0


def _written(model) -> str:
    from timingkit.formats.model_file import format_model_document
    return format_model_document(model.to_document())


def test_planet_masses_agree_with_skyfield():
    # IAU 2009 system ratios (ours) against skyfield.relativity.rmasses (the ratios of
    # an earlier JPL ephemeris): they agree to a few parts in 1e6; a typo would not.
    from skyfield.relativity import rmasses
    for body in PLANETS:
        ours = delays.GM_OVER_C3_S["sun"] / delays.GM_OVER_C3_S[body]
        assert abs(ours / rmasses[body] - 1) < 5e-6, body
    # GM_jupiter-system / c^3 ~ 4.70 ns (IAU 2015 B3 nominal GM of Jupiter alone,
    # 1.2668653e17 m^3/s^2, is 2e-4 lighter than the system with its moons)
    assert abs(delays.GM_OVER_C3_S["jupiter"] * C ** 3 / 1.2668653e17 - 1.0002) < 2e-4


def test_interpolated_retarded_positions_match_jplephem(ephemeris):
    # jplephem evaluated at each retarded time (light time iterated to convergence)
    rng = np.random.default_rng(7)
    mjd = np.sort(rng.uniform(59000.0, 59000.0 + 700.0, 300))
    tdb = SplitTime(np.floor(mjd), mjd - np.floor(mjd), "tdb")
    ours = retarded_positions(ephemeris, ["sun", *PLANETS], tdb)
    earth = ephemeris.position("earth", tdb)
    limits_m = {"sun": 0.05, "mercury": 3e4, "venus": 500.0, "mars": 30.0}
    for body in ["sun", *PLANETS]:
        x = ephemeris.position(body, tdb)
        for _ in range(3):
            lag_days = np.linalg.norm(x - earth, axis=1) / C / 86400.0
            x = ephemeris.position(body, SplitTime(tdb.day, tdb.frac - lag_days, "tdb"))
        assert np.abs(ours[body] - x).max() < limits_m.get(body, 2.0), body


def test_report_names_the_bodies(tmp_path, ephemeris, sites):
    from timingkit.outputs.report import settings_entry
    model = _model("05h10m00s", "+21d00m00s", ["jupiter", "saturn"])
    obs = model.prepare_observations(_geocentre_toa(), sites, ephemeris)
    entry = settings_entry(obs, model)
    assert entry["shapiro_delay_bodies"] == ["sun", "jupiter", "saturn"]
    assert "IAU 2009" in entry["shapiro_delay_masses"]


def test_unknown_planet_is_refused_naming_the_field(ephemeris, sites):
    from timingkit.formats.errors import InputError
    model = _model("05h10m00s", "+21d00m00s", ["jupiter", "vulcan"])
    with pytest.raises(InputError) as err:
        model.prepare_observations(_geocentre_toa(), sites, ephemeris)
    assert err.value.field == "settings.shapiro_delay_planets"
    assert "vulcan" in err.value.message
