"""Binary orbits: Kepler solver, the three orbit models, their partials, fits
of simulated binaries, conversions, derived binary physics and plots.

External checks name their sources beside them. Simulated (invented)
binaries are the test data for the fits: the checks there are that the
injected values come back within 4 sigma and that the orbit is detected.
"""

import json
import math
import os
from decimal import Decimal

import mpmath
import numpy as np
import pytest

from timingkit.formats.errors import FitError, InputError
from timingkit.fit.least_squares import compute_residuals, fit
from timingkit.model import TimingModel
from timingkit.model.binary import keplerian_section, low_eccentricity_section
from timingkit.model.kepler import solve_kepler, true_anomaly
from timingkit.formats.model_file import format_model_document
from timingkit.geometry.observations import prepare_observations
from timingkit.model.simulate import simulate_toas
from numdiff import phase_partial

MSP = '''
name = "sim-binary-msp"
[position]
ra = "14h27m41.62s"
dec = "+38d44m18.9s"
[spin]
epoch_mjd = "58000"
frequency_hz = "261.5304718826193"
frequency_derivatives = ["-5.3e-16"]
[dispersion]
dm = 13.84
'''
# A 5-hour near-circular orbit (invented), companion Shapiro delay as mass / sin i.
FIVE_HOUR = MSP + '''
[binary]
model = "low_eccentricity"
orbital_period_days = "0.2083333333"
projected_semi_major_axis_lt_s = 1.2
e_sin_omega = 3e-5
e_cos_omega = -2e-5
ascending_node_epoch_mjd = "58000.1"
companion_mass_msun = 0.25
sin_inclination = 0.97
'''
# Eccentric double-neutron-star-like orbit (invented: 0.78 d, e = 0.39, two
# 1.35 M_sun stars; the relativistic terms roughly as GR gives them), with
# periastron advance, orbital decay, Einstein delay and companion Shapiro
# delay as range / shape.
DNS = '''
name = "sim-dns"
[position]
ra = "20h26m41.3s"
dec = "+22d48m09.6s"
[spin]
epoch_mjd = "55000"
frequency_hz = "28.6127401836"
frequency_derivatives = ["-1.146e-15"]
[dispersion]
dm = 97.4
[binary]
model = "relativistic"
orbital_period_days = "0.784312067295"
orbital_period_derivative = -1.13e-13
projected_semi_major_axis_lt_s = 2.876034
eccentricity = 0.3920417
periastron_longitude_deg = 148.50260
periastron_advance_deg_per_yr = 0.68361
periastron_epoch_mjd = "55000.2"
einstein_delay_amplitude_s = 0.003641
shapiro_range_s = 6.6e-6
shapiro_shape = 0.95
'''
# A two-week eccentric orbit (invented).
WIDE = MSP + '''
[binary]
model = "keplerian"
orbital_period_days = "13.9637"
projected_semi_major_axis_lt_s = 7.836
eccentricity = 0.12
periastron_longitude_deg = 63.4
periastron_epoch_mjd = "58003.1"
'''


# ------------------------------------------------------------------ Kepler

def test_kepler_solver_matches_meeus_worked_examples():
    # Meeus, Astronomical Algorithms (2nd ed. 1998), ch. 30 "Equation of
    # Kepler", worked examples (values from memory): e = 0.100, M = 5 deg gives
    # E = 5.554589 deg; e = 0.99, M = 2 deg gives E = 32.361007 deg.
    e1 = math.degrees(solve_kepler(math.radians(5.0), 0.1)[0])
    e2 = math.degrees(solve_kepler(math.radians(2.0), 0.99)[0])
    assert abs(e1 - 5.554589) < 5e-7
    assert abs(e2 - 32.361007) < 5e-7


def test_kepler_solver_is_exact_to_1e_15_rad():
    # Independent check: 50-digit roots from mpmath.findroot.
    mpmath.mp.dps = 50
    rng = np.random.default_rng(7)
    for e in (0.0, 1e-6, 0.1, 0.617, 0.9, 0.95):
        m = rng.uniform(-np.pi, np.pi, 40)
        anomaly = solve_kepler(m, e)
        for mi, ei in zip(m, anomaly):
            exact = mpmath.findroot(lambda x: x - e * mpmath.sin(x) - mpmath.mpf(float(mi)),
                                    float(ei))
            assert abs(float(exact - mpmath.mpf(float(ei)))) < 1e-15, (e, mi)
    # whole turns carry through, and the true anomaly keeps them
    m = np.array([0.3, 0.3 + 2 * np.pi * 5, 0.3 - 2 * np.pi * 3])
    anomaly = solve_kepler(m, 0.5)
    assert np.allclose(anomaly - anomaly[0], [0, 2 * np.pi * 5, -2 * np.pi * 3], atol=1e-12)
    nu = true_anomaly(anomaly, 0.5)
    assert np.allclose(nu - nu[0], [0, 2 * np.pi * 5, -2 * np.pi * 3], atol=1e-12)
    # textbook relation tan(nu/2) = sqrt((1+e)/(1-e)) tan(E/2) (Lorimer & Kramer 2005, eq. 8.17)
    assert math.isclose(math.tan(nu[0] / 2), math.sqrt(3.0) * math.tan(anomaly[0] / 2), rel_tol=1e-14)


# ----------------------------------------------------------- model details

def _obs(model, sites, ephemeris, start, end, count, seed, site="geocentre", err=1.0,
         freqs=(820.0, 1400.0), noise=True, flags=None):
    toas = simulate_toas(model, start, end, count, err, sites, ephemeris, site_names=[site],
                         freqs_mhz=list(freqs), seed=seed, add_noise=noise, flags=flags)
    return prepare_observations(toas, sites, ephemeris)


LOW_E_ALL = MSP + '''
[binary]
model = "low_eccentricity"
orbital_period_days = "0.2"
orbital_period_derivative = 1e-12
projected_semi_major_axis_lt_s = 1.5
projected_semi_major_axis_derivative_lt_s_per_s = 1e-14
e_sin_omega = 3e-5
e_cos_omega = -2e-5
e_sin_omega_derivative_per_s = 1e-15
e_cos_omega_derivative_per_s = 1e-15
ascending_node_epoch_mjd = "58000.3"
shapiro_range_s = 5e-6
shapiro_shape = 0.9
'''
KEP_ALL = WIDE.replace('eccentricity = 0.12', '''eccentricity = 0.3
periastron_advance_deg_per_yr = 0.5
einstein_delay_amplitude_s = 1e-4
eccentricity_derivative_per_s = 1e-15
orbital_period_derivative = 1e-12
projected_semi_major_axis_derivative_lt_s_per_s = 1e-14''')
DNS_MASS = DNS.replace("shapiro_range_s = 6.6e-6\nshapiro_shape = 0.95",
                       "companion_mass_msun = 1.35\nsin_inclination = 0.95")
STEPS = {"orbital_period_days": 1e-9, "periastron_epoch_mjd": 1e-8,
         "ascending_node_epoch_mjd": 1e-8, "orbital_period_derivative": 1e-13,
         "eccentricity_derivative_per_s": 1e-16, "e_sin_omega_derivative_per_s": 1e-16,
         "e_cos_omega_derivative_per_s": 1e-16,
         "projected_semi_major_axis_derivative_lt_s_per_s": 1e-14,
         "shapiro_shape": 1e-4, "sin_inclination": 1e-4, "companion_mass_msun": 1e-3}


@pytest.mark.parametrize("text", [KEP_ALL, DNS, DNS_MASS, LOW_E_ALL],
                         ids=["keplerian", "relativistic", "relativistic-mass", "low-e"])
def test_binary_partials_match_numerical_differences(text, sites, ephemeris):
    model = TimingModel.from_text(text)
    obs = _obs(model, sites, ephemeris, 57000, 59000, 80, 3, noise=False, site="desert-dish")
    names = [p.name for p in model.parameters() if p.name.startswith("binary.")]
    ev = model.evaluate(obs)
    design = model.design_matrix(ev, names)
    for j, name in enumerate(names):
        p = model.parameter(name)
        h = STEPS.get(name.split(".", 1)[1], max(abs(p.value) * 1e-6, 1e-7))
        num = phase_partial(model, obs, name, h)
        scale = np.max(np.abs(num))
        assert scale > 0, name
        assert np.max(np.abs(design[:, j] - num)) < 1e-5 * scale, name


def test_retarded_time_is_solved_exactly(sites, ephemeris):
    # t_bary = T + D(T) + S(t): check the emission time against the orbit
    # formula evaluated there (Blandford & Teukolsky 1976 form of D).
    model = TimingModel.from_text(DNS.replace("shapiro_range_s = 6.6e-6", "shapiro_range_s = 0"))
    obs = _obs(model, sites, ephemeris, 54500, 54600, 50, 1, noise=False)
    ev = model.evaluate(obs)
    binary = model.orbit_sections()[0]
    p = {k: v.value for k, v in binary.params.items()}
    epoch = p["periastron_epoch_mjd"]
    day, frac = math.floor(epoch), epoch - math.floor(epoch) + binary.params["periastron_epoch_mjd"].value_lo
    hi, lo = ev.t_bary.seconds_since(day, frac)
    dt = (hi + lo) - ev.binary_s                             # emission time - periastron epoch, seconds
    period_s = p["orbital_period_days"] * 86400
    u = dt / period_s
    mean = 2 * np.pi * (u - 0.5 * p["orbital_period_derivative"] * u ** 2)
    e = p["eccentricity"]
    anomaly = solve_kepler(mean, e)
    k = p["periastron_advance_deg_per_yr"] * math.pi / 180 / (365.25 * 86400) * period_s / (2 * np.pi)
    omega = math.radians(p["periastron_longitude_deg"]) + k * true_anomaly(anomaly, e)
    x = p["projected_semi_major_axis_lt_s"]
    delay = x * np.sin(omega) * (np.cos(anomaly) - e) + (x * np.sqrt(1 - e * e) * np.cos(omega)
                                                      + 0) * np.sin(anomaly) \
        + p["einstein_delay_amplitude_s"] * np.sin(anomaly)
    assert np.max(np.abs(delay - ev.binary_s)) < 2e-9   # float precision of dt ~ 1e-8 s * n x


def test_low_eccentricity_and_keplerian_forms_agree_below_1ns(ephemeris):
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    kep = TimingModel.from_text(MSP + '''
[binary]
model = "keplerian"
orbital_period_days = "0.2"
projected_semi_major_axis_lt_s = 1.5
eccentricity = 1e-5
periastron_longitude_deg = 40.0
periastron_epoch_mjd = "58000.3"
''')
    obs = _obs(kep, sites, ephemeris, 57500, 58500, 300, 2, site="ssb", noise=False)
    doc = kep.to_document()
    doc["binary"] = low_eccentricity_section(doc["binary"])
    low = TimingModel.from_text(format_model_document(doc))
    assert low.orbit_sections()[0].model == "low_eccentricity"
    d = kep.evaluate(obs).binary_s - low.evaluate(obs).binary_s
    # neglected terms are of order x e^2 = 1.5e-10 s (Lange et al. 2001)
    assert np.max(np.abs(d)) < 1e-9
    assert np.max(np.abs(kep.evaluate(obs).binary_s)) > 1.0      # the orbit itself is there
    back = keplerian_section(low.to_document()["binary"])
    assert back["eccentricity"] == pytest.approx(1e-5, rel=1e-12)
    assert back["periastron_longitude_deg"] == pytest.approx(40.0, abs=1e-10)
    assert abs(Decimal(back["periastron_epoch_mjd"]) - Decimal("58000.3")) < Decimal("1e-15")


# ---------------------------------------------------------------- fits

def _fit_and_pulls(truth, obs, free, perturb):
    start = truth.copy()
    for name, delta in perturb.items():
        start.parameter(name).add(delta)
    res = fit(start, obs, free=free)
    pulls = {}
    for name in free:
        p, q = res.model.parameter(name), truth.parameter(name)
        pulls[name] = ((p.value - q.value) + (p.value_lo - q.value_lo)) / p.uncertainty
    return res, pulls


def test_five_hour_near_circular_orbit_is_recovered(sites, ephemeris):
    truth = TimingModel.from_text(FIVE_HOUR)
    obs = _obs(truth, sites, ephemeris, 57500, 58500, 400, 3, site="desert-dish", err=0.5)
    free = ["spin.frequency_hz", "spin.frequency_derivatives.0", "position.ra", "position.dec",
            "dispersion.dm"] + [f"binary.{k}" for k in (
                "orbital_period_days", "projected_semi_major_axis_lt_s", "e_sin_omega",
                "e_cos_omega", "ascending_node_epoch_mjd", "companion_mass_msun",
                "sin_inclination")]
    res, pulls = _fit_and_pulls(truth, obs, free, {
        "binary.projected_semi_major_axis_lt_s": 2e-6, "binary.e_sin_omega": 2e-6,
        "binary.ascending_node_epoch_mjd": 1e-8, "binary.orbital_period_days": 1e-11})
    assert res.converged and 0.8 < res.reduced_chi2 < 1.2
    assert max(abs(v) for v in pulls.values()) < 4, pulls
    for name in ("binary.e_sin_omega", "binary.e_cos_omega", "binary.sin_inclination"):
        p = res.model.parameter(name)
        assert abs(p.value) > 10 * p.uncertainty, name          # measured, not just allowed


def test_eccentric_double_neutron_star_orbit_is_recovered(ephemeris):
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    truth = TimingModel.from_text(DNS)
    obs = _obs(truth, sites, ephemeris, 54000, 56000, 500, 4)
    keys = ("orbital_period_days", "orbital_period_derivative", "projected_semi_major_axis_lt_s",
            "eccentricity", "periastron_longitude_deg", "periastron_advance_deg_per_yr",
            "periastron_epoch_mjd", "einstein_delay_amplitude_s", "shapiro_range_s",
            "shapiro_shape")
    free = ["spin.frequency_hz", "spin.frequency_derivatives.0", "dispersion.dm"] + \
        [f"binary.{k}" for k in keys]
    res, pulls = _fit_and_pulls(truth, obs, free, {
        "binary.projected_semi_major_axis_lt_s": 1e-5, "binary.eccentricity": 1e-6,
        "binary.periastron_advance_deg_per_yr": 1e-4, "binary.shapiro_range_s": 1e-6})
    assert res.converged
    assert max(abs(v) for v in pulls.values()) < 4, pulls
    for key in ("orbital_period_derivative", "periastron_advance_deg_per_yr",
                "einstein_delay_amplitude_s", "shapiro_range_s"):
        p = res.model.parameter(f"binary.{key}")
        assert abs(p.value) > 5 * p.uncertainty, key


def test_wide_keplerian_orbit_is_recovered_and_written_back(tmp_path, ephemeris):
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    truth = TimingModel.from_text(WIDE)
    obs = _obs(truth, sites, ephemeris, 57500, 58500, 300, 5)
    free = ["spin.frequency_hz", "spin.frequency_derivatives.0", "dispersion.dm"] + \
        [f"binary.{k}" for k in ("orbital_period_days", "projected_semi_major_axis_lt_s",
                                 "eccentricity", "periastron_longitude_deg",
                                 "periastron_epoch_mjd")]
    res, pulls = _fit_and_pulls(truth, obs, free, {
        "binary.projected_semi_major_axis_lt_s": 1e-5, "binary.eccentricity": 1e-6,
        "binary.periastron_epoch_mjd": 1e-6})
    assert max(abs(v) for v in pulls.values()) < 4, pulls
    path = tmp_path / "fitted.toml"
    res.model.write(str(path))
    again = TimingModel.from_file(str(path))
    for name in free:
        a, b = again.parameter(name), res.model.parameter(name)
        assert abs((a.value - b.value) + (a.value_lo - b.value_lo)) <= 1e-6 * b.uncertainty, name
        assert a.uncertainty == pytest.approx(b.uncertainty, rel=1e-12), name
    assert set(again.free_names) == set(free)
    r1, r2 = compute_residuals(again, obs), compute_residuals(res.model, obs)
    assert np.max(np.abs(r1.time_s - r2.time_s)) < 1e-10


def test_orbit_switched_off_leaves_the_orbital_period_in_the_residuals(ephemeris):
    from astropy.timeseries import LombScargle
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    # a light companion: 0.5 ms of Roemer delay, 5 % of the 10 ms period,
    # so the pulses stay numbered without the orbit
    text = MSP.replace('"261.5304718826193"', '"100.123"') + '''
[binary]
model = "low_eccentricity"
orbital_period_days = "1.7371"
projected_semi_major_axis_lt_s = 0.0005
ascending_node_epoch_mjd = "58000.3"
'''
    truth = TimingModel.from_text(text)
    obs = _obs(truth, sites, ephemeris, 58000, 58200, 300, 6)
    no_orbit = TimingModel.from_text(text.split("[binary]")[0])
    res = fit(no_orbit, obs, free=["spin.frequency_hz", "spin.frequency_derivatives.0"])
    assert res.postfit.rms_us() > 200                      # the orbit is not fitted
    t = obs.toas.mjd_day + obs.toas.mjd_frac
    freq, power = LombScargle(t, res.postfit.time_us).autopower(minimum_frequency=0.05,
                                                                maximum_frequency=5.0,
                                                                samples_per_peak=20)
    assert abs(1 / freq[np.argmax(power)] - 1.7371) < 0.01
    with_orbit = fit(truth, obs, free=["spin.frequency_hz", "spin.frequency_derivatives.0"])
    assert with_orbit.postfit.rms_us() < 1.5


# ---------------------------------------------------------------- errors

@pytest.mark.parametrize("change, field, message", [
    (('model = "relativistic"', 'model = "elliptic"'), "binary.model", "legal"),
    (("shapiro_shape = 0.95", "shapiro_shape = 0.95\nsin_inclination = 0.9"),
     "binary.companion_mass_msun", "either"),
    (("eccentricity = 0.3920417", "eccentricity = 1.2"), "binary.eccentricity", "[0, 1)"),
    (("eccentricity = 0.3920417", "eccentricity = 0.6\ne_sin_omega = 0.1"),
     "binary.e_sin_omega", "unknown key"),
    (('periastron_epoch_mjd = "55000.2"', ''), "binary.periastron_epoch_mjd", "missing"),
    (("shapiro_shape = 0.95", "shapiro_shape = 1.5"), "binary.shapiro_shape", "[0, 1)"),
])
def test_bad_binary_sections_name_the_field(change, field, message):
    with pytest.raises(InputError) as info:
        TimingModel.from_text(DNS.replace(*change), "bad.toml")
    assert info.value.field == field
    assert message in str(info.value)


def test_shape_without_range_is_named_as_unconstrained(ephemeris):
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    model = TimingModel.from_text(DNS.replace("shapiro_range_s = 6.6e-6", "shapiro_range_s = 0"))
    obs = _obs(model, sites, ephemeris, 54000, 54100, 40, 2, noise=False)
    with pytest.raises(FitError, match="binary.shapiro_shape"):
        fit(model, obs, free=["spin.frequency_hz", "binary.shapiro_shape"])


# ------------------------------------------------------- derived physics

def _report_for(text, ephemeris, free, count=60, span=(57000, 57400)):
    from timingkit.outputs.report import build_report
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    model = TimingModel.from_text(text)
    obs = _obs(model, sites, ephemeris, span[0], span[1], count, 8, noise=False)
    res = fit(model, obs, free=free)
    return build_report(res, obs)


def test_mass_function_of_a_published_binary(ephemeris):
    # PSR J0737-3039A (Kramer et al. 2006, Science 314, 97; values from memory):
    # x = 1.415032 lt-s, Pb = 0.10225156248 d, mass function 0.29096571(87) M_sun.
    text = MSP + '''
[binary]
model = "low_eccentricity"
orbital_period_days = "0.10225156248"
projected_semi_major_axis_lt_s = 1.415032
ascending_node_epoch_mjd = "57000.1"
[binary.uncertainty]
projected_semi_major_axis_lt_s = 2e-6
'''
    rep = _report_for(text, ephemeris, ["spin.frequency_hz"])
    q = rep["derived_binary"]["quantities"]
    assert q["mass_function_msun"]["value"] == pytest.approx(0.29096571, rel=1e-6)
    assert q["mass_function_msun"]["uncertainty"] > 0
    # the minimum companion mass solves f = m_c^3 / (1.4 + m_c)^2 (sin i = 1)
    mc = q["minimum_companion_mass_msun"]["value"]
    assert mc ** 3 / (1.4 + mc) ** 2 == pytest.approx(0.29096571, rel=1e-6)
    assert any("1.4 M_sun" in c for c in rep["derived_binary"]["cautions"])


def test_hulse_taylor_masses_and_gr_decay_in_the_report(ephemeris):
    # PSR B1913+16 (Weisberg & Huang 2016, ApJ 829, 55; values from memory):
    # its published timing solution; e = 0.6171334, omega_dot = 4.226598
    # deg/yr, gamma = 4.307 ms -> M = 2.828378 M_sun, m_p = 1.438,
    # m_c = 1.390 M_sun, GR Pb_dot = -2.40263e-12.
    text = '''
name = "B1913+16"
[position]
ra = "19h15m28.0s"
dec = "+16d06m27.0s"
[spin]
epoch_mjd = "55000"
frequency_hz = "16.94053768"
frequency_derivatives = ["-2.47e-15"]
[dispersion]
dm = 168.77
[binary]
model = "relativistic"
orbital_period_days = "0.322997448918"
orbital_period_derivative = -2.423e-12
projected_semi_major_axis_lt_s = 2.341776
eccentricity = 0.6171334
periastron_longitude_deg = 292.54450
periastron_advance_deg_per_yr = 4.226598
periastron_epoch_mjd = "55000.2"
einstein_delay_amplitude_s = 0.004307
shapiro_range_s = 6.8e-6
shapiro_shape = 0.73
'''
    rep = _report_for(text, ephemeris, ["spin.frequency_hz"], span=(55000, 55030))
    q = rep["derived_binary"]["quantities"]
    assert q["total_mass_msun"]["value"] == pytest.approx(2.828378, abs=2e-5)
    assert q["pulsar_mass_msun"]["value"] == pytest.approx(1.438, abs=1.5e-3)
    assert q["companion_mass_msun"]["value"] == pytest.approx(1.390, abs=1.5e-3)
    assert q["orbital_period_derivative_gr"]["value"] == pytest.approx(-2.40263e-12, rel=1e-3)
    assert q["orbital_period_derivative_observed_over_gr"]["value"] == pytest.approx(1.0085,
                                                                                   abs=2e-3)
    from timingkit.outputs.report import summary_text
    assert "orbital_period_derivative_gr" in summary_text(rep)


def test_kinematic_orbital_decay_of_a_nearby_binary(ephemeris):
    # PSR J0437-4715 (Verbiest et al. 2008, ApJ 679, 675; parallax Deller et al.
    # 2008; values from memory): observed Pb_dot = 3.73(6)e-12 is kinematic
    # (Shklovskii + Galactic) at d = 156 pc, mu = 140.9 mas/yr.
    text = '''
name = "nearby-binary"
[position]
ra = "04h37m15.81s"
dec = "-47d15m08.6s"
pm_ra_cosdec_mas_per_yr = 121.4385
pm_dec_mas_per_yr = -71.4754
parallax_mas = 6.396
[position.uncertainty]
parallax_mas = 0.054
pm_ra_cosdec_mas_per_yr = 0.002
pm_dec_mas_per_yr = 0.002
[spin]
epoch_mjd = "57000"
frequency_hz = "173.6879457375201"
frequency_derivatives = ["-1.728e-15"]
[binary]
model = "keplerian"
orbital_period_days = "5.741046"
orbital_period_derivative = 3.73e-12
projected_semi_major_axis_lt_s = 3.36669
eccentricity = 1.918e-5
periastron_longitude_deg = 1.2
periastron_epoch_mjd = "57001.2"
[binary.uncertainty]
orbital_period_derivative = 0.06e-12
'''
    rep = _report_for(text, ephemeris, ["spin.frequency_hz"])
    q = rep["derived_binary"]["quantities"]
    shk = q["orbital_period_derivative_shklovskii"]["value"]
    # handbook form: Pdot_shk / P = 2.43e-21 s^-1 (mu / mas/yr)^2 (d / kpc)
    # (Lorimer & Kramer 2005, eq. 8.? from memory)
    assert shk == pytest.approx(2.43e-21 * 140.915 ** 2 * (1 / 6.396) * 5.741046 * 86400,
                                rel=3e-3)
    intrinsic = q["orbital_period_derivative_intrinsic"]
    assert abs(intrinsic["value"]) < 3 * intrinsic["uncertainty"]
    kin = rep["derived_kinematic"]
    assert kin["distance_kpc"] == pytest.approx(1 / 6.396)
    assert "parallax" in kin["distance_source"]
    assert kin["quantities"]["intrinsic_period_derivative"]["value"] < \
        rep["derived"]["period_derivative"]["value"]


def test_fit_writes_orbital_phase_and_day_of_year_plots(tmp_path, ephemeris):
    from timingkit.pipeline.fit_run import fit_files
    from timingkit.geometry.sites import SiteTable
    from timingkit.formats.toa_writer import write_toa_table
    sites = SiteTable.with_files([])
    text = WIDE + '\n[fit]\nfree = ["spin.frequency_hz", "binary.projected_semi_major_axis_lt_s"]\n'
    model = TimingModel.from_text(text)
    toas = simulate_toas(model, 57500, 57700, 50, 1.0, sites, ephemeris,
                         site_names=["geocentre"], freqs_mhz=[1400.0], seed=2)
    write_toa_table(toas, str(tmp_path / "b.toas"))
    (tmp_path / "b.toml").write_text(text)
    fit_files(str(tmp_path / "b.toas"), str(tmp_path / "b.toml"), str(tmp_path / "out"))
    names = set(os.listdir(tmp_path / "out"))
    assert {"residuals_orbital_phase.png", "residuals_day_of_year.png"} <= names
    rep = json.loads((tmp_path / "out" / "report.json").read_text())
    assert rep["derived_binary"]["model"] == "keplerian"
    (tmp_path / "s.toml").write_text(text.split("[binary]")[0]
                                     + '[fit]\nfree = ["spin.frequency_hz"]\n')
    single = TimingModel.from_text((tmp_path / "s.toml").read_text())
    toas = simulate_toas(single, 57500, 57700, 30, 1.0, sites, ephemeris,
                         site_names=["geocentre"], freqs_mhz=[1400.0], seed=2)
    write_toa_table(toas, str(tmp_path / "s.toas"))
    fit_files(str(tmp_path / "s.toas"), str(tmp_path / "s.toml"), str(tmp_path / "out2"))
    names = set(os.listdir(tmp_path / "out2"))
    assert "residuals_day_of_year.png" in names and "residuals_orbital_phase.png" not in names


def test_upstream_partials_include_the_orbits_time_warp(sites, ephemeris):
    # Position and DM move the arrival at the barycentre; the orbit maps that onto
    # the emission time with d(t_emit)/d(t_bary) = 1/(1 + dD/dt) (~1e-3 off unity
    # for a tight orbit). The analytic columns must match numerical differences
    # to far better than that factor.
    model = TimingModel.from_text(DNS)
    obs = _obs(model, sites, ephemeris, 57000, 57010, 80, 4, noise=False, site="desert-dish")
    names = ["dispersion.dm", "position.ra", "position.dec"]
    ev = model.evaluate(obs)
    design = model.design_matrix(ev, names)
    for j, (name, h) in enumerate(zip(names, (1e-3, 1e-8, 1e-8))):
        num = phase_partial(model, obs, name, h)
        err = np.max(np.abs(design[:, j] - num)) / np.max(np.abs(num))
        warp = np.max(np.abs(ev.extra["emit_per_bary"] - 1.0))
        assert warp > 1e-4, "test orbit too slow to show the effect"
        assert err < 0.05 * warp, name
