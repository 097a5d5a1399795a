"""Derived quantities of binary pulsars and kinematic corrections to Pdot.

Masses are in solar masses (M_sun), the projected semi-major axis x = a_p sin i
in light-seconds, orbital periods in days, angles in degrees.  Every result is
a dict in the shape of :func:`timingkit.physics.spin.quantity`
(``value, uncertainty, unit, assumptions, note``); uncertainties are
first-order propagation of the uncertainties given for the inputs (inputs
given without one are treated as exact; no uncertainty at all gives None).

Contents
- Keplerian: mass function, companion mass for an inclination, minimum
  companion mass (sin i = 1).
- General relativity, post-Keplerian parameters from the two masses
  (Damour & Deruelle 1986; Taylor & Weisberg 1989, ApJ 345, 434; also
  Lorimer & Kramer 2005, sect. 8.4): periastron advance, Einstein-delay
  amplitude gamma, orbital decay (Peters 1964 with the Peters & Mathews
  1963 enhancement f(e)), Shapiro range r and shape s; and the total mass
  from a measured periastron advance.
- Kinematics: Shklovskii (1970) term P mu^2 d / c, Galactic acceleration
  (Damour & Taylor 1991, ApJ 366, 501: flat rotation curve plus a vertical
  term), and :func:`intrinsic_spin` which removes both from an observed
  period derivative and re-derives age, field and luminosity.

Pure functions on floats (numpy/scipy; astropy only in
:func:`galactic_from_icrs`).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy.optimize import brentq

from timingkit.physics.spin import (SECONDS_PER_JULIAN_YEAR, derive_spin_from_period,
                                    finite_number, quantity)
from timingkit.formats.errors import InputError

# GM_sun / c^3 in seconds from the IAU 2015 Resolution B3 nominal solar mass
# parameter (1.3271244e20 m^3 s^-2) and the exact speed of light.
SOLAR_MASS_TIME_S = 4.925490947e-6
SPEED_OF_LIGHT_M_PER_S = 299792458.0
SECONDS_PER_DAY = 86400.0
KPC_M = 3.0856775814913673e19       # IAU 2012 au and pc = 648000/pi au
MAS_RAD = math.pi / (180.0 * 3600.0 * 1000.0)

# Common practice: minimum companion masses are quoted for a 1.4 M_sun
# pulsar seen edge-on (the pulsar catalogue uses 1.35 M_sun).
CANONICAL_PULSAR_MASS_MSUN = 1.4

# Galactic constants for the acceleration model: Reid et al. 2019 (ApJ 885,
# 131) give R0 = 8.15 +- 0.15 kpc and Theta0 = 236 +- 7 km/s from maser
# parallaxes.  Pass your own dict to override.
GALACTIC_CONSTANTS = {
    "distance_to_centre_kpc": 8.15,
    "circular_speed_km_per_s": 236.0,
    "source": "Reid et al. 2019, ApJ 885, 131",
}
# Vertical acceleration K_z(z) = (2.27 z + 3.68 (1 - exp(-4.31 z))) 1e-9
# cm s^-2, z in kpc: the Holmberg & Flynn (2004, MNRAS 352, 440) model in
# the form used for pulsar kinematic corrections by Lazaridis et al. (2009,
# MNRAS 400, 805); fitted for |z| <~ 1.5 kpc.
_KZ_LINEAR, _KZ_STEP, _KZ_SCALE_PER_KPC = 2.27e-9, 3.68e-9, 4.31
_KZ_VALID_KPC = 1.5

_GR = ("general relativity, point masses (Damour & Deruelle 1986; Taylor & "
       "Weisberg 1989)")


# --- small helpers ----------------------------------------------------------
def _num(x: Any, field: str, *, positive: bool = False,
         nonnegative: bool = False) -> float:
    v = finite_number(x, field)
    if positive and v <= 0:
        raise InputError(f"must be positive, got {v!r}", field=field)
    if nonnegative and v < 0:
        raise InputError(f"must not be negative, got {v!r}", field=field)
    return v


def _err(x: Any, field: str) -> float | None:
    return None if x is None else _num(x, field, nonnegative=True)


def _eccentricity(e: Any, field: str = "eccentricity") -> float:
    v = _num(e, field, nonnegative=True)
    if v >= 1:
        raise InputError(f"eccentricity must be in [0, 1), got {v!r}", field=field)
    return v


def _independent(terms: list[tuple[float, float | None]]) -> float | None:
    """sqrt(sum (df/dx_i sigma_i)^2) over inputs with a sigma; None if none."""
    given = [(g, s) for g, s in terms if s is not None]
    if not given:
        return None
    return math.sqrt(sum((g * s) ** 2 for g, s in given))


def _mass_cov(mass_covariance: Any) -> np.ndarray | None:
    if mass_covariance is None:
        return None
    cov = np.asarray(mass_covariance, dtype=float)
    if cov.shape != (2, 2) or not np.all(np.isfinite(cov)) or np.any(np.diag(cov) < 0) \
            or not math.isclose(cov[0, 1], cov[1, 0], rel_tol=1e-8, abs_tol=1e-300):
        raise InputError("mass_covariance must be a symmetric 2x2 matrix of "
                         "(pulsar mass, companion mass) in M_sun^2",
                         field="mass_covariance")
    return cov


def _with_masses(grad_masses: tuple[float, float], cov: np.ndarray | None,
                 other: list[tuple[float, float | None]] = ()) -> float | None:
    var = 0.0
    have = False
    if cov is not None:
        g = np.asarray(grad_masses)
        var += float(g @ cov @ g)
        have = True
    for g, s in other:
        if s is not None:
            var += (g * s) ** 2
            have = True
    return math.sqrt(max(var, 0.0)) if have else None


# --- Keplerian --------------------------------------------------------------
def mass_function(projected_semi_major_axis_lt_s: float, orbital_period_days: float, *,
                  projected_semi_major_axis_err_lt_s: float | None = None,
                  orbital_period_err_days: float | None = None) -> dict[str, Any]:
    """Mass function f = 4 pi^2 x^3 / (T_sun P_b^2) = (m_c sin i)^3 / M^2 in M_sun.

    x in light-seconds, P_b in days, T_sun = GM_sun/c^3 (IAU 2015 B3).
    """
    x = _num(projected_semi_major_axis_lt_s, "projected_semi_major_axis_lt_s", positive=True)
    period_days = _num(orbital_period_days, "orbital_period_days", positive=True)
    period_s = period_days * SECONDS_PER_DAY
    f = 4.0 * math.pi ** 2 * x ** 3 / (SOLAR_MASS_TIME_S * period_s ** 2)
    unc = _independent([
        (3.0 * f / x, _err(projected_semi_major_axis_err_lt_s, "projected_semi_major_axis_err_lt_s")),
        (-2.0 * f / period_days, _err(orbital_period_err_days, "orbital_period_err_days")),
    ])
    return quantity(f, unc, "M_sun", "Keplerian orbit; f = (m_c sin i)^3 / (m_p + m_c)^2")


def companion_mass(mass_function_msun: float, *, inclination_deg: float = 90.0,
                   pulsar_mass_msun: float = CANONICAL_PULSAR_MASS_MSUN,
                   mass_function_err_msun: float | None = None,
                   inclination_err_deg: float | None = None,
                   pulsar_mass_err_msun: float | None = None) -> dict[str, Any]:
    """Companion mass (M_sun) solving (m_c sin i)^3 / (m_p + m_c)^2 = f.

    The left side rises monotonically with m_c, so the root is unique; it is
    found numerically (Brent's method, relative accuracy ~1e-15).  i = 90 deg
    gives the minimum mass, i = 60 deg the median for random orientations
    (common practice).
    """
    f = _num(mass_function_msun, "mass_function_msun", positive=True)
    inc_deg = _num(inclination_deg, "inclination_deg")
    mp = _num(pulsar_mass_msun, "pulsar_mass_msun", nonnegative=True)
    sin_i = math.sin(math.radians(inc_deg))
    if not 0.0 < inc_deg < 180.0 or sin_i <= 0:
        raise InputError(f"inclination must lie strictly between 0 and 180 deg, "
                         f"got {inc_deg!r}", field="inclination_deg")
    target = f / sin_i ** 3

    def excess(m):
        return m ** 3 - target * (mp + m) ** 2

    # For m >= mp, m^3/(mp+m)^2 >= m/4, so this upper end has excess > 0.
    upper = 1.01 * max(mp, 4.0 * target) + 1e-30
    mc = brentq(excess, 0.0, upper, xtol=1e-300, rtol=1e-15, maxiter=500)

    # Implicit derivatives of F(m, mp) = m^3/(mp+m)^2 = target.
    dF_dm = mc ** 2 * (mc + 3.0 * mp) / (mp + mc) ** 3
    dm_dtarget = 1.0 / dF_dm
    dm_dmp = 2.0 * mc / (mc + 3.0 * mp)
    cos_i = math.cos(math.radians(inc_deg))
    dtarget_dinc_deg = -3.0 * f * cos_i / sin_i ** 4 * math.radians(1.0)
    unc = _independent([
        (dm_dtarget / sin_i ** 3, _err(mass_function_err_msun, "mass_function_err_msun")),
        (dm_dtarget * dtarget_dinc_deg, _err(inclination_err_deg, "inclination_err_deg")),
        (dm_dmp, _err(pulsar_mass_err_msun, "pulsar_mass_err_msun")),
    ])
    what = "minimum companion mass (sin i = 1)" if inc_deg == 90.0 else \
        f"companion mass for inclination {inc_deg:g} deg"
    return quantity(mc, unc, "M_sun",
                    f"{what}, pulsar mass {mp:g} M_sun; Keplerian orbit")


def minimum_companion_mass(mass_function_msun: float, *,
                           pulsar_mass_msun: float = CANONICAL_PULSAR_MASS_MSUN,
                           mass_function_err_msun: float | None = None) -> dict[str, Any]:
    """Companion mass for an edge-on orbit (sin i = 1) and, by default, a
    1.4 M_sun pulsar (common practice)."""
    return companion_mass(mass_function_msun, inclination_deg=90.0,
                          pulsar_mass_msun=pulsar_mass_msun,
                          mass_function_err_msun=mass_function_err_msun)


# --- general relativity -----------------------------------------------------
def _enhancement(e: float) -> tuple[float, float]:
    """Peters & Mathews (1963) f(e) = (1 + 73/24 e^2 + 37/96 e^4)(1-e^2)^-7/2
    and d ln f / de."""
    num = 1.0 + 73.0 / 24.0 * e ** 2 + 37.0 / 96.0 * e ** 4
    dnum = 2.0 * 73.0 / 24.0 * e + 4.0 * 37.0 / 96.0 * e ** 3
    f = num / (1.0 - e ** 2) ** 3.5
    return f, dnum / num + 7.0 * e / (1.0 - e ** 2)


def total_mass_from_periastron_advance(
        periastron_advance_deg_per_yr: float, orbital_period_days: float,
        eccentricity: float, *, periastron_advance_err_deg_per_yr: float | None = None,
        orbital_period_err_days: float | None = None,
        eccentricity_err: float | None = None) -> dict[str, Any]:
    """Total mass M = m_p + m_c (M_sun) from the periastron advance in GR.

    omega_dot = 3 (P_b / 2 pi)^-5/3 (T_sun M)^2/3 / (1 - e^2)  [rad/s]
    (Taylor & Weisberg 1982, ApJ 253, 908; Lorimer & Kramer 2005 sect. 8.4),
    solved for M.  Years are Julian.
    """
    advance_deg_per_yr = _num(periastron_advance_deg_per_yr, "periastron_advance_deg_per_yr",
                              positive=True)
    period_days = _num(orbital_period_days, "orbital_period_days", positive=True)
    e = _eccentricity(eccentricity)
    advance_rad_per_s = math.radians(advance_deg_per_yr) / SECONDS_PER_JULIAN_YEAR
    period_s = period_days * SECONDS_PER_DAY
    m = (advance_rad_per_s * (1.0 - e ** 2) / 3.0) ** 1.5 * (period_s / (2.0 * math.pi)) ** 2.5 \
        / SOLAR_MASS_TIME_S
    unc = _independent([
        (1.5 * m / advance_deg_per_yr, _err(periastron_advance_err_deg_per_yr, "periastron_advance_err_deg_per_yr")),
        (2.5 * m / period_days, _err(orbital_period_err_days, "orbital_period_err_days")),
        (-3.0 * e * m / (1.0 - e ** 2), _err(eccentricity_err, "eccentricity_err")),
    ])
    return quantity(m, unc, "M_sun", _GR + "; periastron advance purely relativistic "
                    "(no tidal or spin-orbit contribution)")


def orbital_decay_gr(pulsar_mass_msun: float, companion_mass_msun: float,
                     orbital_period_days: float, eccentricity: float, *,
                     mass_covariance: Any = None) -> dict[str, Any]:
    """Orbital period derivative (s/s) from gravitational-wave emission:

    Pb_dot = -(192 pi / 5) (P_b / 2 pi)^-5/3 f(e) T_sun^5/3 m_p m_c M^-1/3
    (Peters 1964; Taylor & Weisberg 1982), f(e) of Peters & Mathews 1963.
    ``mass_covariance`` is the 2x2 covariance of (m_p, m_c) in M_sun^2.
    """
    return post_keplerian_gr(pulsar_mass_msun, companion_mass_msun, orbital_period_days,
                             eccentricity, None,
                             mass_covariance=mass_covariance)["orbital_period_derivative"]


def post_keplerian_gr(pulsar_mass_msun: float, companion_mass_msun: float,
                      orbital_period_days: float, eccentricity: float,
                      projected_semi_major_axis_lt_s: float | None = None, *,
                      mass_covariance: Any = None) -> dict[str, dict[str, Any]]:
    """Post-Keplerian parameters predicted by GR from the two masses.

    Returns, in this order (T = T_sun, n = 2 pi / P_b, M = m_p + m_c):
      periastron_advance_deg_per_yr  3 n^5/3 (T M)^2/3 / (1 - e^2)
      einstein_delay_amplitude_s     gamma = e n^-1/3 T^2/3 M^-4/3 m_c (m_p + 2 m_c)
      orbital_period_derivative      see :func:`orbital_decay_gr`
      shapiro_range_s                r = T m_c
      shapiro_shape                  s = sin i = x n^2/3 T^-1/3 M^2/3 / m_c
                                     (only when x is given; > 1 gets a note)
    (Damour & Deruelle 1986; Taylor & Weisberg 1989, ApJ 345, 434;
    Lorimer & Kramer 2005 sect. 8.4.)  Uncertainties from ``mass_covariance``
    (2x2, M_sun^2) only; P_b, e and x are taken as exact.
    """
    mp = _num(pulsar_mass_msun, "pulsar_mass_msun", positive=True)
    mc = _num(companion_mass_msun, "companion_mass_msun", positive=True)
    period_s = _num(orbital_period_days, "orbital_period_days", positive=True) * SECONDS_PER_DAY
    e = _eccentricity(eccentricity)
    cov = _mass_cov(mass_covariance)
    T = SOLAR_MASS_TIME_S
    M = mp + mc
    n = 2.0 * math.pi / period_s
    out: dict[str, dict[str, Any]] = {}

    advance_rad_per_s = 3.0 * n ** (5 / 3) * (T * M) ** (2 / 3) / (1.0 - e ** 2)
    advance_deg_per_yr = math.degrees(advance_rad_per_s) * SECONDS_PER_JULIAN_YEAR
    g = 2.0 / 3.0 * advance_deg_per_yr / M
    out["periastron_advance_deg_per_yr"] = quantity(
        advance_deg_per_yr, _with_masses((g, g), cov), "deg/yr", _GR)

    einstein_s = e * n ** (-1 / 3) * T ** (2 / 3) * M ** (-4 / 3) * mc * (mp + 2.0 * mc)
    dln_mp = -4.0 / (3.0 * M) + 1.0 / (mp + 2.0 * mc)
    dln_mc = -4.0 / (3.0 * M) + 1.0 / mc + 2.0 / (mp + 2.0 * mc)
    out["einstein_delay_amplitude_s"] = quantity(
        einstein_s, _with_masses((einstein_s * dln_mp, einstein_s * dln_mc), cov), "s",
        _GR + "; gravitational redshift plus second-order Doppler amplitude")

    fe, _ = _enhancement(e)
    period_dot = -(192.0 * math.pi / 5.0) * n ** (5 / 3) * fe * T ** (5 / 3) * mp * mc * M ** (-1 / 3)
    out["orbital_period_derivative"] = quantity(
        period_dot, _with_masses((period_dot * (1.0 / mp - 1.0 / (3.0 * M)),
                             period_dot * (1.0 / mc - 1.0 / (3.0 * M))), cov), "s/s",
        _GR + "; quadrupole gravitational-wave emission only (no kinematic terms)")

    out["shapiro_range_s"] = quantity(
        T * mc, _with_masses((0.0, T), cov), "s", _GR)

    if projected_semi_major_axis_lt_s is not None:
        x = _num(projected_semi_major_axis_lt_s, "projected_semi_major_axis_lt_s", positive=True)
        s = x * n ** (2 / 3) * T ** (-1 / 3) * M ** (2 / 3) / mc
        note = None
        if s > 1.0:
            note = ("s > 1: these masses cannot produce the given projected "
                    "semi-major axis at any inclination")
        out["shapiro_shape"] = quantity(
            s, _with_masses((s * 2.0 / (3.0 * M), s * (2.0 / (3.0 * M) - 1.0 / mc)), cov),
            "", _GR + "; s = sin i", note)
    return out


# --- kinematic contributions to period derivatives -------------------------
def shklovskii_period_derivative(period_s: float, proper_motion_mas_per_yr: float,
                                 distance_kpc: float, *,
                                 proper_motion_err_mas_per_yr: float | None = None,
                                 distance_err_kpc: float | None = None) -> dict[str, Any]:
    """Apparent period derivative P mu^2 d / c from transverse motion
    (Shklovskii 1970).  mu is the total proper motion
    sqrt(mu_ra_cosdec^2 + mu_dec^2) in mas/yr, d in kpc.  Works for spin or
    orbital periods (give the period in seconds)."""
    p = _num(period_s, "period_s", positive=True)
    mu = _num(proper_motion_mas_per_yr, "proper_motion_mas_per_yr", nonnegative=True)
    d = _num(distance_kpc, "distance_kpc", positive=True)
    mu_rad_s = mu * MAS_RAD / SECONDS_PER_JULIAN_YEAR
    value = p * mu_rad_s ** 2 * d * KPC_M / SPEED_OF_LIGHT_M_PER_S
    unc = _independent([
        (2.0 * value / mu if mu > 0 else 0.0,
         _err(proper_motion_err_mas_per_yr, "proper_motion_err_mas_per_yr")),
        (value / d, _err(distance_err_kpc, "distance_err_kpc")),
    ])
    return quantity(value, unc, "s/s", "Shklovskii (1970): P mu^2 d / c; distance "
                    "as given (parallax or dispersion-measure distances differ)")


def _galactic_fraction(l_deg: float, b_deg: float, d_kpc: float,
                       constants: dict[str, Any]) -> tuple[float, float, float]:
    """(Pdot/P)_Galactic in 1/s and its derivative in d (1/s per kpc), plus |z|."""
    r0 = _num(constants["distance_to_centre_kpc"], "distance_to_centre_kpc", positive=True)
    theta0 = _num(constants["circular_speed_km_per_s"], "circular_speed_km_per_s", positive=True)
    c_cm = SPEED_OF_LIGHT_M_PER_S * 100.0
    l, b = math.radians(l_deg), math.radians(b_deg)
    cos_b, sin_l2 = math.cos(b), math.sin(l) ** 2
    # Planar: -(Theta0^2 / (c R0)) cos b (cos l + beta / (sin^2 l + beta^2)),
    # beta = (d/R0) cos b - cos l  (Damour & Taylor 1991; Nice & Taylor 1995).
    beta = d_kpc / r0 * cos_b - math.cos(l)
    denom = sin_l2 + beta ** 2
    if denom < 1e-12:
        raise InputError("the source lies at the Galactic centre: the flat-"
                         "rotation-curve acceleration model does not apply",
                         field="distance_kpc")
    scale = (theta0 * 1e5) ** 2 / (c_cm * r0 * KPC_M * 100.0)
    planar = -scale * cos_b * (math.cos(l) + beta / denom)
    dplanar = -scale * cos_b * (sin_l2 - beta ** 2) / denom ** 2 * cos_b / r0
    # Vertical: pulled towards the plane, projected on the line of sight.
    abs_sin_b = abs(math.sin(b))
    z = d_kpc * abs_sin_b
    kz = _KZ_LINEAR * z + _KZ_STEP * (1.0 - math.exp(-_KZ_SCALE_PER_KPC * z))
    dkz_dz = _KZ_LINEAR + _KZ_STEP * _KZ_SCALE_PER_KPC * math.exp(-_KZ_SCALE_PER_KPC * z)
    vertical = -kz * abs_sin_b / c_cm
    dvertical = -dkz_dz * abs_sin_b ** 2 / c_cm
    return planar + vertical, dplanar + dvertical, z


def galactic_period_derivative(period_s: float, galactic_longitude_deg: float,
                               galactic_latitude_deg: float, distance_kpc: float, *,
                               distance_err_kpc: float | None = None,
                               constants: dict[str, Any] | None = None) -> dict[str, Any]:
    """Apparent period derivative P (a . n) / c from the differential Galactic
    acceleration of pulsar and Sun: flat rotation curve in the plane plus the
    vertical disc pull (Damour & Taylor 1991; vertical term after Holmberg &
    Flynn 2004).  l, b in degrees, d in kpc; constants default to
    :data:`GALACTIC_CONSTANTS`.  Works for spin or orbital periods."""
    constants = GALACTIC_CONSTANTS if constants is None else constants
    p = _num(period_s, "period_s", positive=True)
    l_deg = _num(galactic_longitude_deg, "galactic_longitude_deg")
    b_deg = _num(galactic_latitude_deg, "galactic_latitude_deg")
    if abs(b_deg) > 90:
        raise InputError(f"Galactic latitude must be within +-90 deg, got {b_deg!r}",
                         field="galactic_latitude_deg")
    d = _num(distance_kpc, "distance_kpc", positive=True)
    frac, dfrac, z = _galactic_fraction(l_deg, b_deg, d, constants)
    unc = _independent([(p * dfrac, _err(distance_err_kpc, "distance_err_kpc"))])
    note = None
    if z > _KZ_VALID_KPC:
        note = (f"|z| = {z:.2f} kpc is beyond the {_KZ_VALID_KPC} kpc range of "
                "the vertical-acceleration fit")
    r0 = constants["distance_to_centre_kpc"]
    th = constants["circular_speed_km_per_s"]
    src = constants.get("source", "user supplied")
    return quantity(p * frac, unc, "s/s",
                    f"flat rotation curve, R0 = {r0} kpc, Theta0 = {th} km/s ({src}); "
                    "vertical K_z fit of Holmberg & Flynn 2004; Sun in the plane", note)


def galactic_from_icrs(ra_deg: float, dec_deg: float) -> tuple[float, float]:
    """ICRS right ascension and declination (deg) to Galactic (l, b) in deg,
    through astropy.coordinates."""
    from astropy import units as u
    from astropy.coordinates import SkyCoord
    ra = _num(ra_deg, "ra_deg")
    dec = _num(dec_deg, "dec_deg")
    if abs(dec) > 90:
        raise InputError(f"declination must be within +-90 deg, got {dec!r}", field="dec_deg")
    g = SkyCoord(ra=ra * u.deg, dec=dec * u.deg, frame="icrs").galactic
    return float(g.l.deg), float(g.b.deg)


def remove_kinematic_terms(period_s: float, observed: float, proper_motion_mas_per_yr: float,
                           distance_kpc: float, galactic_longitude_deg: float | None,
                           galactic_latitude_deg: float | None, *,
                           observed_err: float | None = None,
                           proper_motion_err_mas_per_yr: float | None = None,
                           distance_err_kpc: float | None = None,
                           constants: dict[str, Any] | None = None):
    """An observed (spin or orbital) period derivative less its Shklovskii and
    Galactic terms: (shklovskii quantity, galactic quantity, intrinsic value,
    intrinsic uncertainty). Both terms grow with the distance, so its error
    enters them fully correlated: sigma^2 = sigma_obs^2 + (d/dmu sigma_mu)^2
    + ((dShk/dd + dGal/dd) sigma_d)^2 (first order), not their quadrature sum.
    Without Galactic coordinates the Galactic term is left out (value None)."""
    p = _num(period_s, "period_s", positive=True)
    pdot_obs = _num(observed, "period_derivative")
    sig_pdot = _err(observed_err, "period_derivative_err")
    sig_mu = _err(proper_motion_err_mas_per_yr, "proper_motion_err_mas_per_yr")
    sig_d = _err(distance_err_kpc, "distance_err_kpc")
    shk = shklovskii_period_derivative(p, proper_motion_mas_per_yr, distance_kpc,
                                       proper_motion_err_mas_per_yr=sig_mu,
                                       distance_err_kpc=sig_d)
    mu = float(proper_motion_mas_per_yr)
    d = float(distance_kpc)
    dgal_dd = 0.0
    if galactic_longitude_deg is None or galactic_latitude_deg is None:
        gal_value = 0.0
        gal = quantity(None, None, "s/s", "not evaluated",
                       "Galactic coordinates not given: Galactic acceleration not removed")
    else:
        gal = galactic_period_derivative(p, galactic_longitude_deg, galactic_latitude_deg, d,
                                         distance_err_kpc=sig_d, constants=constants)
        _, dfrac, _ = _galactic_fraction(float(galactic_longitude_deg),
                                         float(galactic_latitude_deg), d,
                                         GALACTIC_CONSTANTS if constants is None else constants)
        gal_value, dgal_dd = gal["value"], p * dfrac
    unc = _independent([
        (1.0, sig_pdot),
        (-2.0 * shk["value"] / mu if mu > 0 else 0.0, sig_mu),
        (-shk["value"] / d - dgal_dd, sig_d),
    ])
    return shk, gal, pdot_obs - shk["value"] - gal_value, unc


_INTRINSIC = "intrinsic period derivative (Shklovskii and Galactic terms removed)"


def intrinsic_spin(period_s: float, period_derivative: float, *,
                   proper_motion_mas_per_yr: float, distance_kpc: float,
                   galactic_longitude_deg: float | None = None,
                   galactic_latitude_deg: float | None = None,
                   period_derivative_err: float | None = None,
                   proper_motion_err_mas_per_yr: float | None = None,
                   distance_err_kpc: float | None = None,
                   constants: dict[str, Any] | None = None) -> dict[str, dict[str, Any]]:
    """Remove kinematic terms from an observed Pdot and re-derive the spin-down
    quantities.

    Returns, in order: ``shklovskii_period_derivative``,
    ``galactic_period_derivative`` (value None with a note when l, b are not
    given), ``intrinsic_period_derivative``, then ``characteristic_age_yr``,
    ``surface_dipole_field_gauss``, ``surface_dipole_field_tesla``,
    ``spin_down_luminosity_erg_per_s``, ``light_cylinder_field_gauss`` from
    the intrinsic Pdot.  The distance uncertainty enters both kinematic terms
    (correlated); the period is taken as exact.  A non-positive intrinsic
    Pdot gives None with a note for the braking quantities.
    """
    p = _num(period_s, "period_s", positive=True)
    shk, gal, pdot_int, unc = remove_kinematic_terms(
        p, period_derivative, proper_motion_mas_per_yr, distance_kpc, galactic_longitude_deg,
        galactic_latitude_deg, observed_err=period_derivative_err,
        proper_motion_err_mas_per_yr=proper_motion_err_mas_per_yr,
        distance_err_kpc=distance_err_kpc, constants=constants)
    out: dict[str, dict[str, Any]] = {"shklovskii_period_derivative": shk,
                                      "galactic_period_derivative": gal}
    note = gal["note"]
    out["intrinsic_period_derivative"] = quantity(
        pdot_int, unc, "s/s", "observed minus Shklovskii minus Galactic terms", note)

    cov = None if unc is None else np.diag([0.0, unc ** 2])
    spin = derive_spin_from_period(p, pdot_int, cov)
    for key in ("characteristic_age_yr", "surface_dipole_field_gauss",
                "surface_dipole_field_tesla", "spin_down_luminosity_erg_per_s",
                "light_cylinder_field_gauss"):
        q = dict(spin[key])
        q["assumptions"] = q["assumptions"].replace("observed period derivative", _INTRINSIC)
        if pdot_int <= 0:
            q["note"] = ("intrinsic period derivative is not positive: the kinematic "
                         "terms exceed the observed value (distance or proper motion "
                         "overestimated, or an unmodelled acceleration)")
        elif note and not q["note"]:
            q["note"] = note
        out[key] = q
    return out
