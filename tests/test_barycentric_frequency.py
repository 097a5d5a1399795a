"""The observing frequency in the barycentric frame: the rate of TDB against
the observer's clock against the derivative of ERFA's TDB - TT series, and
the dispersion constant (catalogue by default, physical on request)."""

import numpy as np
import pytest

from timingkit.formats.toa_table import ToaTable
from timingkit.geometry import delays, earth_orientation
from timingkit.geometry.observations import prepare_observations
from timingkit.model.timing_model import TimingModel
from timingkit.numerics.timearray import SplitTime


def _observations(sites, ephemeris, site="desert-dish", n=60):
    mjd = np.linspace(58000.0, 58365.0, n) + 0.137
    day = np.floor(mjd)
    toas = ToaTable.from_arrays(day, mjd - day, np.ones(n), np.full(n, 400.0),
                                np.array([site] * n))
    return prepare_observations(toas, sites, ephemeris), day, mjd - day


def test_clock_rate_matches_the_derivative_of_erfa_dtdb(sites, ephemeris):
    import erfa
    obs, day, frac = _observations(sites, ephemeris)
    ours = obs.tdb_minus_proper_time_rate
    site = sites.lookup("desert-dish")
    utc = SplitTime(day, frac, "utc")
    ut1_frac = np.mod(frac + earth_orientation.ut1_minus_utc_s(utc) / 86400.0, 1.0)
    step_s = 300.0

    def tdb_minus_tt(shift_s, topocentric=True):
        # ERFA dtdb (the SOFA Fairhead & Bretagnon series with the topocentric
        # terms: UT1 fraction, east longitude, distances from the axis and equator in km)
        extra = ((ut1_frac + shift_s / 86400.0, site.longitude_rad, site.spin_axis_distance_km,
                  site.equator_distance_km) if topocentric else (0.0, 0.0, 0.0, 0.0))
        return erfa.dtdb(obs.tdb.jd1, obs.tdb.jd2 + shift_s / 86400.0, *extra)

    numeric = (tdb_minus_tt(step_s) - tdb_minus_tt(-step_s)) / (2 * step_s)
    # annual (~3e-10) and diurnal (~1.5e-10) parts, agreeing to ~1e-12
    assert np.ptp(numeric) > 5e-10
    assert np.max(np.abs(ours - numeric)) < 2e-12
    geocentric = (tdb_minus_tt(step_s, False) - tdb_minus_tt(-step_s, False)) / (2 * step_s)
    assert np.max(np.abs(ours - geocentric)) > 5e-11          # the diurnal term is in


def _dm_model(extra: str = "") -> TimingModel:
    return TimingModel.from_text(f"""name = "invented-dm"
[position]
ra = "11h22m33s"
dec = "+05d06m07s"
[spin]
epoch_mjd = "58000"
frequency_hz = "1.25"
[dispersion]
dm = 100.0
[settings]
{extra}
""")


def test_barycentric_frequency_uses_the_clock_rate(sites, ephemeris):
    obs, _, _ = _observations(sites, ephemeris)
    ev = _dm_model().evaluate(obs)
    v_dot_n = np.einsum("ij,ij->i", obs.observer_ssb_vel_m_per_s, ev.direction)
    # f_B = f_obs (1 - d(TDB - tau)/dTDB) / (1 + v.n/c) (relativistic Doppler with the
    # observer's proper time, e.g. Rybicki & Lightman 1979 eq. 4.11)
    expected = 400.0 * (1 - obs.tdb_minus_proper_time_rate) / (1 + v_dot_n / 299792458.0)
    assert np.allclose(ev.freq_bary_mhz, expected, rtol=1e-15, atol=0)
    # DM 100 at 400 MHz (2.59 s of delay): the clock rate (~1e-9) is worth a few ns, as
    # the audit measured, and the second-order Doppler term (v.n/c)^2 ~ 1e-8 ~50 ns
    exact_doppler = 400.0 / (1 + v_dot_n / 299792458.0)
    rate_part = delays.dispersion_delay_s(100.0, exact_doppler) - ev.dispersion_s
    assert 1e-9 < np.max(np.abs(rate_part)) < 1e-8
    first_order = 400.0 * (1 - v_dot_n / 299792458.0)
    change = delays.dispersion_delay_s(100.0, first_order) - ev.dispersion_s
    assert 2e-8 < np.max(np.abs(change)) < 1e-7


def test_dispersion_constants():
    # e^2 / (2 pi m_e c) in Gaussian units from astropy.constants (CODATA 2018):
    # 4148.806 s MHz^2 pc^-1 cm^3; the catalogue convention is 1/2.41e-4 = 4149.378
    import astropy.constants as const
    import astropy.units as u
    e = const.e.gauss.value
    physical = e ** 2 / (2 * np.pi * const.m_e.cgs.value * const.c.cgs.value)   # cm^2 s^-1
    physical *= (u.pc / u.cm ** 3).to(u.cm ** -2) / 1e12                          # s MHz^2 pc^-1 cm^3
    assert abs(delays.DISPERSION_CONSTANTS_S_MHZ2["physical"] - physical) < 1e-3
    assert abs(physical - 4148.806) < 1e-3
    assert abs(delays.DISPERSION_CONSTANTS_S_MHZ2["catalogue"] - 4149.378) < 1e-3


def test_model_file_chooses_the_physical_constant_and_the_report_says_so(sites, ephemeris):
    from timingkit.formats.errors import InputError
    from timingkit.outputs.report import settings_entry
    obs, _, _ = _observations(sites, ephemeris, n=3)
    catalogue = _dm_model()
    physical = _dm_model('dispersion_constant = "physical"')
    ratio = physical.evaluate(obs).dispersion_s / catalogue.evaluate(obs).dispersion_s
    assert np.allclose(ratio, 4148.806423882746 / (1 / 2.41e-4), rtol=1e-12)
    entry = settings_entry(obs, physical)["dispersion_constant"]
    assert entry["name"] == "physical" and abs(entry["value_s_mhz2_cm3_per_pc"] - 4148.806) < 1e-3
    assert settings_entry(obs, catalogue)["dispersion_constant"]["name"] == "catalogue"
    with pytest.raises(InputError) as err:
        _dm_model('dispersion_constant = "cgs"')
    assert err.value.field == "settings.dispersion_constant"
