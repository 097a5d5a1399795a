"""Event barycentring: the fast path (exact chain at grid nodes, interpolated)
against the project's TOA chain per event, against an astropy-based geometric
computation for a spacecraft, and against the spin polynomial in exact
arithmetic for barycentric events."""

from fractions import Fraction

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord, get_body_barycentric_posvel, solar_system_ephemeris
from astropy.time import Time
from astropy.utils import iers

from events_support import TT_KEYWORDS, circular_orbit_state, ogip_events, write_inputs, write_orbit
from timingkit.formats.toa_table import ToaTable
from timingkit.geometry.ephemeris import builtin_ephemeris_path
from timingkit.geometry.observations import prepare_observations
from timingkit.geometry.sites import SiteTable
from timingkit.pipeline.event_run import load_event_inputs, time_selected
from timingkit.pipeline.inputs import load_context

iers.conf.auto_download = False
iers.conf.auto_max_age = None

# An invented 4.8-hour binary and a glitch in the middle of the data: the
# fastest terms the interpolation has to follow, and a kink it must not smooth.
BINARY_MODEL = """name = "test-binary"
[position]
ra = "17h53m20.1234567s"
dec = "-07d41m12.345678s"
pm_ra_cosdec_mas_per_yr = -3.1
pm_dec_mas_per_yr = 4.7
parallax_mas = 0.9
epoch_mjd = "58000"
[spin]
epoch_mjd = "58000"
frequency_hz = "287.45612387654321"
frequency_derivatives = ["-6.1234e-16"]
[binary]
model = "low_eccentricity"
orbital_period_days = "0.2"
projected_semi_major_axis_lt_s = 1.2
e_sin_omega = 3e-5
e_cos_omega = -2e-5
ascending_node_epoch_mjd = "58000.05"
[[glitch]]
epoch_mjd = "58001.0"
frequency_step_hz = 2e-6
[phase_zero]
mjd = "58000.3"
site = "ssb"
"""


def _plain_model(spin_lines: str = "") -> str:
    """The invented source with no proper motion or parallax."""
    return ('name = "test-plain"\n[position]\nra = "05h12m33.4567s"\ndec = "+21d02m11.234s"\n'
            '[spin]\nepoch_mjd = "58000"\nfrequency_hz = "29.7123456789"\n' + spin_lines)


def _fast_and_chain(tmp_path, keywords, model_text, site):
    rng = np.random.default_rng(11)
    seconds = np.sort(rng.uniform(0.0, 2 * 86400.0, 20000))
    path = ogip_events(tmp_path / "e.fits", seconds, keywords)
    model_path, sites_path = write_inputs(tmp_path, model_text, "shapiro_delay_planets = true\n")
    inputs = load_event_inputs(path, model_path, site=site)
    clock, timing = time_selected(inputs)
    # the TOA chain: a ToaTable of the same times through prepare_observations
    times = inputs.events.times()
    toas = ToaTable(mjd_text=np.full(len(times), "", dtype="<U1"), mjd_day=times.day,
                    mjd_frac=times.frac, err_us=np.ones(len(times)),
                    freq_mhz=np.full(len(times), np.inf), site=np.full(len(times), site))
    model = inputs.model
    sites, eph, clocks = load_context(model)
    obs = prepare_observations(toas, SiteTable.with_files([sites_path]), eph,
                               planets=model.settings["shapiro_delay_planets"])
    ev = model.evaluate(obs, inputs.reference)
    ours = clock.at(clock.seconds + timing.bary_offset_s, clock.seconds_lo)
    bary_diff_s = ((ours.day - ev.t_bary.day) + (ours.frac - ev.t_bary.frac)) * 86400.0
    phase_diff = (timing.phase - ev.phase_frac + 0.5) % 1.0 - 0.5
    return timing, bary_diff_s, phase_diff / ev.spin_frequency_hz


@pytest.mark.parametrize("scale, site", [("UTC", "dune-array"), ("TT", "geocentre")])
def test_events_agree_with_the_toa_chain(tmp_path, scale, site):
    keywords = {**TT_KEYWORDS, "TIMESYS": scale,
                "TIMEREF": "LOCAL" if site != "geocentre" else "GEOCENTRIC"}
    timing, bary_diff_s, phase_diff_s = _fast_and_chain(tmp_path, keywords, BINARY_MODEL, site)
    assert timing.accuracy["method"].startswith("exact chain at grid nodes")
    assert timing.accuracy["events_exact"] > 0          # the cells around the glitch
    assert np.max(np.abs(bary_diff_s)) < 1e-9
    assert np.max(np.abs(phase_diff_s)) < 1e-9
    assert timing.accuracy["max_interpolation_error_ns"] < 1.0


def test_spacecraft_events_against_astropy_geometry(tmp_path):
    # Independent path (astropy): Time.tdb (ERFA, geocentric) plus v_E . r / c^2 for
    # the spacecraft's offset, the Earth and Sun from get_body_barycentric_posvel on the
    # same DE421 file, the spacecraft position from the orbit computed by hand, the
    # plane-wave Roemer delay and the solar Shapiro delay -2 GM/c^3 ln(|rho| + rho.n)
    # (Backer & Hellings 1986). The model has no proper motion or parallax.
    model_text = _plain_model()
    rng = np.random.default_rng(12)
    seconds = np.sort(rng.uniform(100.0, 86000.0, 8000))
    path = ogip_events(tmp_path / "e.fits", seconds, TT_KEYWORDS)
    orbit = write_orbit(tmp_path / "orbit.txt", 58000.0, 58001.0, 30.0)
    # the solar term only: the planets' (on by default) are checked against astropy in
    # test_planet_shapiro.py
    model_path, _ = write_inputs(tmp_path, model_text, "shapiro_delay_planets = false\n")
    inputs = load_event_inputs(path, model_path, orbit=orbit)
    clock, timing = time_selected(inputs)
    t = Time(np.full(len(seconds), 58000.0), seconds / 86400.0, format="mjd", scale="tt")
    tdb = t.tdb
    with solar_system_ephemeris.set(builtin_ephemeris_path()):
        earth, earth_vel = get_body_barycentric_posvel("earth", tdb)
        sun, _ = get_body_barycentric_posvel("sun", tdb)
    c = 299792458.0
    r_sc, _ = circular_orbit_state(seconds)
    observer = earth.xyz.to_value(u.m).T + r_sc
    n = SkyCoord("05h12m33.4567s", "+21d02m11.234s", frame="icrs").cartesian.xyz.value
    rho = observer - sun.xyz.to_value(u.m).T
    gm_sun_s = 1.3271244e20 / c ** 3             # IAU 2015 Resolution B3
    shapiro = -2 * gm_sun_s * np.log((np.linalg.norm(rho, axis=1) + rho @ n) / 1.495978707e11)
    term = np.einsum("ij,ij->i", earth_vel.xyz.to_value(u.m / u.s).T, r_sc) / c ** 2
    tdb_minus_tt = ((tdb.jd1 - t.jd1) + (tdb.jd2 - t.jd2)) * 86400.0
    expected = tdb_minus_tt + term + observer @ n / c - shapiro
    assert np.max(np.abs(timing.bary_offset_s - expected)) < 2e-9
    # the spacecraft's own offset is in it: ~23 ms of light travel at most
    assert 0.01 < np.max(np.abs(r_sc @ n / c)) < 0.0232


def test_barycentric_events_follow_the_spin_polynomial_exactly(tmp_path):
    # TIMEREF = SOLARSYSTEM: no delays; phase = F0 dt + F1 dt^2 / 2 from the spin
    # epoch, computed here in exact rational arithmetic.
    f0, f1 = Fraction("29.7123456789"), Fraction("-3.1e-10")
    seconds = np.array([0.0, 1234.5678, 86399.9, 3.0e5, 2.0e6])
    keywords = {**TT_KEYWORDS, "TIMESYS": "TDB", "TIMEREF": "SOLARSYSTEM", "MJDREFI": 57990}
    path = ogip_events(tmp_path / "e.fits", seconds, keywords)
    model_path, _ = write_inputs(tmp_path, _plain_model('frequency_derivatives = ["-3.1e-10"]\n'))
    inputs = load_event_inputs(path, model_path)
    assert inputs.observer.kind == "ssb"
    _, timing = time_selected(inputs)
    for got, s in zip(timing.phase, seconds):
        dt = Fraction(s) - 10 * 86400
        exact = f0 * dt + f1 * dt * dt / 2
        expected = float(exact - (exact.numerator // exact.denominator))
        assert abs((got - expected + 0.5) % 1.0 - 0.5) < 1e-9
    assert np.all(timing.bary_offset_s == 0.0)
