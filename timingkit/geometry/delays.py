"""Propagation delays from the observatory to the solar-system barycentre.

All functions are vectorised over TOAs and return seconds. Sign convention
(DESIGN.md §3): barycentric time = TDB + roemer - shapiro - dispersion - binary.
Vectors are in metres in ICRF axes; ``direction`` is the unit vector from the
barycentre towards the pulsar.
"""

from __future__ import annotations

import numpy as np

SPEED_OF_LIGHT_M_PER_S = 299792458.0           # exact (SI definition)
AU_M = 149597870700.0                          # IAU 2012 Resolution B2
PARSEC_M = AU_M * 648000.0 / np.pi             # IAU 2015 Resolution B2
MAS_TO_RAD = np.pi / (180.0 * 3600.0 * 1000.0)
JULIAN_YEAR_S = 365.25 * 86400.0

# GM/c^3 in seconds. Sun: IAU 2015 Resolution B3 nominal solar mass parameter
# 1.3271244e20 m^3 s^-2 -> 4.925490947 µs. Planets: that GM divided by the
# Sun / planet-system mass ratios of the IAU 2009 System of Astronomical
# Constants (Luzum et al. 2011, Celest. Mech. Dyn. Astr. 110, 293, Table 1),
# the ratios fitted with the DE421-era ephemerides. Each planet's mass is that
# of the whole system (planet and moons), placed at the system barycentre the
# ephemeris gives (NAIF codes 1-8).
GM_SUN_M3_PER_S2 = 1.3271244e20
SUN_TO_PLANET_MASS_RATIO = {
    "mercury": 6.0236e6,
    "venus": 4.08523719e5,
    "mars": 3.09870359e6,
    "jupiter": 1.047348644e3,
    "saturn": 3.4979018e3,
    "uranus": 2.290298e4,
    "neptune": 1.941226e4,
}
PLANET_MASSES_SOURCE = ("GM_sun of IAU 2015 Resolution B3 over the Sun/planet-system mass "
                        "ratios of the IAU 2009 System of Astronomical Constants")
GM_M3_PER_S2 = {"sun": GM_SUN_M3_PER_S2}
GM_M3_PER_S2.update({body: GM_SUN_M3_PER_S2 / ratio
                     for body, ratio in SUN_TO_PLANET_MASS_RATIO.items()})
GM_OVER_C3_S = {body: gm / SPEED_OF_LIGHT_M_PER_S ** 3 for body, gm in GM_M3_PER_S2.items()}

# IAU 2006 Resolution B3: L_C, the mean rate of TCB - TCG (= the mean of
# (v^2/2 + U) / c^2 at the geocentre); TDB - TT has no mean rate.
MEAN_RATE_TCB_MINUS_TCG = 1.48082686741e-8

# Dispersion constants in s MHz^2 pc^-1 cm^3 (delay = constant * DM / f^2):
# - "catalogue": 1 / 2.41e-4 = 4149.378 (Manchester & Taylor 1972), the
#   convention of the pulsar catalogues' DM values; the default.
# - "physical": e^2 / (2 pi m_e c) (Gaussian units) = c r_e / (2 pi) in SI,
#   with the CODATA 2018 classical electron radius r_e = 2.8179403262e-15 m:
#   4148.806. DMs of the two differ by the ratio 1.00014.
CLASSICAL_ELECTRON_RADIUS_M = 2.8179403262e-15          # CODATA 2018
DISPERSION_CONSTANTS_S_MHZ2 = {
    "catalogue": 1.0 / 2.41e-4,
    "physical": (SPEED_OF_LIGHT_M_PER_S * CLASSICAL_ELECTRON_RADIUS_M / (2.0 * np.pi)
                 * PARSEC_M * 1e6 / 1e12),
}
DISPERSION_CONSTANT_SOURCES = {
    "catalogue": "1/2.41e-4 s MHz^2 pc^-1 cm^3 (catalogue convention, Manchester & Taylor 1972)",
    "physical": "e^2/(2 pi m_e c) = 4148.806 s MHz^2 pc^-1 cm^3 (CODATA 2018)",
}
DISPERSION_CONSTANT_S_MHZ2 = DISPERSION_CONSTANTS_S_MHZ2["catalogue"]


def _dot(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return np.einsum("ij,ij->i", a, b)


def roemer_delay_s(observer_ssb_m: np.ndarray, direction: np.ndarray,
                   distance_m: float | None = None) -> np.ndarray:
    """Geometric (Roemer) delay: plane wave r.n/c, minus the wave-front
    curvature (parallax) term (|r|^2 - (r.n)^2)/(2 c d) when a distance is given
    (Lorimer & Kramer 2005, eq. 8.8 and following)."""
    direction = np.broadcast_to(direction, observer_ssb_m.shape)
    r_dot_n = _dot(observer_ssb_m, direction)
    delay = r_dot_n / SPEED_OF_LIGHT_M_PER_S
    if distance_m is not None and np.isfinite(distance_m) and distance_m > 0:
        r2 = _dot(observer_ssb_m, observer_ssb_m)
        delay = delay - (r2 - r_dot_n ** 2) / (2.0 * SPEED_OF_LIGHT_M_PER_S * distance_m)
    return delay


def shapiro_delay_s(body_to_observer_m: np.ndarray, direction: np.ndarray,
                    gm_over_c3_s: float = GM_OVER_C3_S["sun"]) -> np.ndarray:
    """Shapiro delay of a point mass, full form with the observer distance:
    -2 (GM/c^3) ln((|rho| + rho.n) / 1 au), rho = body -> observer
    (Backer & Hellings 1986, ARA&A 24, 537; Lorimer & Kramer 2005, ch. 8).
    The 1 au normalisation only adds a constant; at the solar limb it gives
    ~112.6 µs. Unlike the elongation-only form, it keeps the annual
    +-0.17 µs term from the varying Sun-observer distance."""
    direction = np.broadcast_to(direction, body_to_observer_m.shape)
    rho = np.sqrt(_dot(body_to_observer_m, body_to_observer_m))
    return -2.0 * gm_over_c3_s * np.log((rho + _dot(body_to_observer_m, direction)) / AU_M)


def barycentric_frequency_mhz(freq_mhz: np.ndarray, observer_velocity_m_per_s: np.ndarray,
                              direction: np.ndarray,
                              tdb_minus_proper_time_rate=None) -> np.ndarray:
    """Observing frequency in the barycentric (TDB) frame.

    A plane wave from direction n has phase f_B (t + n.x/c) in barycentric
    coordinates; an observer moving with velocity v whose clock keeps proper
    time tau sees f_obs = f_B (1 + v.n/c) dt/dtau, so
    f_B = f_obs (dtau/dt) / (1 + v.n/c): the exact Doppler factor (second
    order in v/c included, up to 1e-8) times the rate of the observer's
    clock against TDB, 1 - d(TDB - tau)/dTDB (``tdb_minus_proper_time_rate``,
    annual ~3e-10 and diurnal ~1.5e-10; see :func:`tdb_minus_proper_time_rate`).
    """
    direction = np.broadcast_to(direction, observer_velocity_m_per_s.shape)
    doppler = 1.0 + _dot(observer_velocity_m_per_s, direction) / SPEED_OF_LIGHT_M_PER_S
    clock = 1.0 if tdb_minus_proper_time_rate is None else 1.0 - tdb_minus_proper_time_rate
    return freq_mhz * clock / doppler


def tdb_minus_proper_time_rate(observer_velocity_m_per_s: np.ndarray,
                               body_to_observer_m: dict[str, np.ndarray],
                               other_potential_m2_per_s2=0.0) -> np.ndarray:
    """d(TDB - tau)/dTDB for an observer on the geoid moving with barycentric
    velocity v through the potential U = sum GM/|r| of the bodies given by
    their vectors to the observer plus ``other_potential_m2_per_s2`` (the
    planets, at the geocentre): (v^2/2 + U)/c^2 - L_C (IAU 2006 Resolution B3;
    the site's own rotation speed and the Earth's potential are part of TT's
    definition and add only a ~1e-12 constant here). The v^2/2 term holds the
    diurnal v_Earth.v_site/c^2. Accurate to ~1e-12 (the omitted Moon and tidal
    terms), ample for dispersion: 1e-10 in frequency is 0.5 ns for DM 100 at
    400 MHz."""
    v = observer_velocity_m_per_s
    potential = 0.5 * _dot(v, v) + other_potential_m2_per_s2
    for body, vec in body_to_observer_m.items():
        potential = potential + GM_M3_PER_S2[body] / np.sqrt(_dot(vec, vec))
    return potential / SPEED_OF_LIGHT_M_PER_S ** 2 - MEAN_RATE_TCB_MINUS_TCG


def dispersion_delay_s(dm_pc_cm3, freq_mhz: np.ndarray,
                       constant_s_mhz2: float = DISPERSION_CONSTANT_S_MHZ2) -> np.ndarray:
    """Cold-plasma dispersion delay constant * DM / f^2 s, f in MHz; 0 at
    f = inf. The default constant is the catalogue convention 1/2.41e-4."""
    freq_mhz = np.asarray(freq_mhz, dtype=float)
    with np.errstate(divide="ignore"):
        inv_f2 = np.where(np.isfinite(freq_mhz), 1.0 / freq_mhz ** 2, 0.0)
    return constant_s_mhz2 * np.asarray(dm_pc_cm3) * inv_f2


def unit_vector(ra_rad: float, dec_rad: float) -> np.ndarray:
    cd = np.cos(dec_rad)
    return np.array([cd * np.cos(ra_rad), cd * np.sin(ra_rad), np.sin(dec_rad)])


def direction_with_proper_motion(ra_rad: float, dec_rad: float, pm_ra_cosdec_mas_per_yr: float,
                                 pm_dec_mas_per_yr: float, years_since_epoch: np.ndarray):
    """Unit vectors towards the pulsar at each time, moving linearly on the sky
    along the local east and north directions (renormalised). Returns
    (n (N,3), east (3,), north (3,))."""
    east = np.array([-np.sin(ra_rad), np.cos(ra_rad), 0.0])
    north = np.array([-np.sin(dec_rad) * np.cos(ra_rad), -np.sin(dec_rad) * np.sin(ra_rad),
                      np.cos(dec_rad)])
    n0 = unit_vector(ra_rad, dec_rad)
    dt = np.asarray(years_since_epoch, dtype=float)[:, None]
    n = n0 + dt * (pm_ra_cosdec_mas_per_yr * MAS_TO_RAD * east
                   + pm_dec_mas_per_yr * MAS_TO_RAD * north)
    n /= np.sqrt(_dot(n, n))[:, None]
    return n, east, north
