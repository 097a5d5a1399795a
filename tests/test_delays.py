"""Delay formulae against handbook values and published constants."""

import numpy as np

from timingkit.geometry import delays


def test_dispersion_delay_dm100_at_1ghz():
    # Manchester & Taylor (1972) catalogue convention: DM / (2.41e-4 f^2) s.
    # DM = 100 pc cm^-3 at 1000 MHz -> 0.41494 s.
    assert abs(delays.dispersion_delay_s(100.0, np.array([1000.0]))[0] - 0.41494) < 1e-5
    assert delays.dispersion_delay_s(100.0, np.array([np.inf]))[0] == 0.0


def test_solar_shapiro_delay_at_the_limb():
    # At the solar limb, with GM_sun/c^3 = 4.925490947 µs (IAU 2015 Resolution B3),
    # -2 T ln(1 - cos psi) with psi = R_sun / 1 au gives ~112.6 µs.
    assert abs(delays.GM_OVER_C3_S["sun"] - 4.925490947e-6) < 1e-14
    r_sun_m = 695700e3  # IAU 2015 Resolution B3 nominal solar radius
    psi = r_sun_m / delays.AU_M
    # pulsar just behind the limb: n points away from the observer past the Sun
    rho = np.array([[-delays.AU_M, 0.0, 0.0]])          # Sun -> observer
    n = np.array([np.cos(psi), np.sin(psi), 0.0])       # observer -> pulsar nearly +x
    d = delays.shapiro_delay_s(rho, n)[0]
    assert abs(d - 112.6e-6) < 0.2e-6


def test_full_shapiro_form_keeps_distance_term():
    # The elongation-only form -2T ln(1 + cos theta) lacks -2T ln(|rho|/au):
    # at perihelion vs aphelion (e = 0.0167) the difference is ~ +-0.165 µs.
    n = np.array([0.0, 1.0, 0.0])
    near = delays.shapiro_delay_s(np.array([[delays.AU_M * (1 - 0.0167), 0, 0]]), n)[0]
    far = delays.shapiro_delay_s(np.array([[delays.AU_M * (1 + 0.0167), 0, 0]]), n)[0]
    expected = 2 * delays.GM_OVER_C3_S["sun"] * np.log((1 + 0.0167) / (1 - 0.0167))
    assert abs((near - far) - expected) < 1e-12
    assert 0.3e-6 < near - far < 0.35e-6


def test_roemer_plane_wave_and_parallax_term():
    # 1 au along the line of sight: 499.004784 s (IAU 2012 B2: 1 au / c).
    r = np.array([[delays.AU_M, 0.0, 0.0]])
    n = np.array([1.0, 0.0, 0.0])
    assert abs(delays.roemer_delay_s(r, n)[0] - 499.00478384) < 1e-6
    # perpendicular 1 au at 1 kpc: curvature term au^2/(2 c d) (Lorimer & Kramer 2005, §8)
    r = np.array([[0.0, delays.AU_M, 0.0]])
    d = 1000 * delays.PARSEC_M
    got = delays.roemer_delay_s(r, n, d)[0]
    assert abs(got + delays.AU_M ** 2 / (2 * 299792458.0 * d)) < 1e-15
    assert 1.1e-6 < -got < 1.3e-6  # ~1.2 µs for 1 mas parallax (common practice)


def test_barycentric_frequency_doppler():
    # Relativistic Doppler formula (Rybicki & Lightman 1979, eq. 4.11): an observer
    # approaching the source at beta sees f_obs = gamma f (1 + beta); the 1/gamma
    # (proper time) part is the clock-rate factor, so without it f = f_obs / (1 + beta),
    # which differs from the first-order f_obs (1 - beta) by f beta^2 = 1.4e-5 MHz here.
    v = np.array([[30e3, 0.0, 0.0]])   # 30 km/s towards the pulsar
    beta = 30e3 / 299792458.0
    f = delays.barycentric_frequency_mhz(np.array([1400.0]), v, np.array([1.0, 0.0, 0.0]))[0]
    assert abs(f - 1400.0 / (1 + beta)) < 1e-12
    assert abs(f - 1400.0 * (1 - beta)) > 1e-5
    # with the clock rate: gamma^-1 = 1 - beta^2/2 when the clock's whole rate is
    # its speed (no potential): f = f_obs sqrt(1 - beta^2) / (1 + beta)
    rate = np.array([1.0 - np.sqrt(1 - beta ** 2)])
    f = delays.barycentric_frequency_mhz(np.array([1400.0]), v, np.array([1.0, 0.0, 0.0]), rate)[0]
    assert abs(f - 1400.0 * np.sqrt(1 - beta ** 2) / (1 + beta)) < 1e-12


def test_proper_motion_moves_direction_by_mu_t():
    n, east, north = delays.direction_with_proper_motion(1.0, 0.3, 100.0, -50.0, np.array([10.0]))
    n0 = delays.unit_vector(1.0, 0.3)
    # after 10 yr: 1000 mas east, 500 mas south (small-angle)
    assert abs((n[0] - n0) @ east - 1000 * delays.MAS_TO_RAD) < 1e-12
    assert abs((n[0] - n0) @ north + 500 * delays.MAS_TO_RAD) < 1e-12
