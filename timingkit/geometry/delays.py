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
# 1.3271244e20 m^3 s^-2 -> 4.925490947 µs. Planets: system GM values of the
# JPL DE430 ephemeris (Folkner et al. 2014, IPN Progress Report 42-196, table
# of planetary GM), rounded to 7-9 digits, ample for a delay of a few ns.
GM_OVER_C3_S = {
    "sun": 1.3271244e20 / SPEED_OF_LIGHT_M_PER_S ** 3,
    "venus": 3.24858592e14 / SPEED_OF_LIGHT_M_PER_S ** 3,
    "jupiter": 1.26712764e17 / SPEED_OF_LIGHT_M_PER_S ** 3,
    "saturn": 3.7940585e16 / SPEED_OF_LIGHT_M_PER_S ** 3,
    "uranus": 5.794556e15 / SPEED_OF_LIGHT_M_PER_S ** 3,
    "neptune": 6.836527e15 / SPEED_OF_LIGHT_M_PER_S ** 3,
}

# 1/2.41e-4 s MHz^2 pc^-1 cm^3: the catalogue convention (Manchester & Taylor 1972).
DISPERSION_CONSTANT_S_MHZ2 = 1.0 / 2.41e-4


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
                              direction: np.ndarray) -> np.ndarray:
    """Observing frequency in the barycentric frame, f (1 - v.n/c) (first order)."""
    direction = np.broadcast_to(direction, observer_velocity_m_per_s.shape)
    return freq_mhz * (1.0 - _dot(observer_velocity_m_per_s, direction) / SPEED_OF_LIGHT_M_PER_S)


def dispersion_delay_s(dm_pc_cm3, freq_mhz: np.ndarray) -> np.ndarray:
    """Cold-plasma dispersion delay DM / (2.41e-4 f^2) s, f in MHz; 0 at f = inf."""
    freq_mhz = np.asarray(freq_mhz, dtype=float)
    with np.errstate(divide="ignore"):
        inv_f2 = np.where(np.isfinite(freq_mhz), 1.0 / freq_mhz ** 2, 0.0)
    return DISPERSION_CONSTANT_S_MHZ2 * np.asarray(dm_pc_cm3) * inv_f2


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
