"""Report sections for the full timing model: the position in both frames,
derived binary physics and the kinematic (Shklovskii, Galactic) corrections
to the observed period derivatives.

Everything is computed by :mod:`timingkit.physics.binary` from the fitted
model; this module only picks the inputs (with their uncertainties) and
states the assumptions:

- ``derived_binary``: mass function; minimum and median (i = 60 deg)
  companion masses for a 1.4 M_sun pulsar (common practice); with a
  periastron advance, the total mass (GR, Taylor & Weisberg 1982); with the
  Einstein amplitude too, both masses (solving gamma for m_c at that total
  mass) and the GR orbital decay they predict (Peters 1964); with a
  companion Shapiro delay, the companion mass r / T_sun and sin i; and the
  kinematic part of the orbital period derivative with the intrinsic rest.
- ``derived_kinematic``: when proper motion and a distance (``distance_kpc``
  or, failing that, 1 / parallax) are known, the Shklovskii (1970) and
  Galactic (Damour & Taylor 1991) terms of the spin period derivative, the
  intrinsic period derivative and the age, field and luminosity from it.
"""

from __future__ import annotations

import math

import numpy as np

from timingkit.physics import binary as dbin
from timingkit.physics.spin import quantity
from timingkit.model.astrometry import position_summary
from timingkit.model.binary import Binary, SOLAR_MASS_TIME_S

SECONDS_PER_DAY = 86400.0


def _binary_of(model) -> Binary | None:
    for comp in model.extra:
        if isinstance(comp, Binary):
            return comp
    return None


def _value_err(binary: Binary, key: str):
    p = binary.params.get(key)
    if p is None:
        return 0.0, None
    return p.value + p.value_lo, p.uncertainty


def _eccentricity(binary: Binary):
    if "eccentricity" in binary.params:
        return _value_err(binary, "eccentricity")
    h, sh = _value_err(binary, "e_sin_omega")
    k, sk = _value_err(binary, "e_cos_omega")
    e = math.hypot(h, k)
    if e == 0 or (sh is None and sk is None):
        return e, None
    return e, math.hypot(h * (sh or 0.0), k * (sk or 0.0)) / e


def masses_from_advance_and_einstein(advance_deg_per_yr: float, einstein_s: float,
                                     period_days: float, e: float) -> tuple[float, float, float]:
    """(total, companion, pulsar) masses in M_sun from the periastron advance
    and the Einstein amplitude in GR (Taylor & Weisberg 1989, ApJ 345, 434):
    M from omega_dot, then gamma = e n^-1/3 T^2/3 M^-4/3 m_c (M + m_c)
    solved for m_c (the positive root of the quadratic)."""
    total = dbin.total_mass_from_periastron_advance(advance_deg_per_yr, period_days, e)["value"]
    n = 2.0 * math.pi / (period_days * SECONDS_PER_DAY)
    c = (einstein_s * total ** (4.0 / 3.0) * n ** (1.0 / 3.0)
         / (e * SOLAR_MASS_TIME_S ** (2.0 / 3.0)))
    companion = (-total + math.sqrt(total ** 2 + 4.0 * c)) / 2.0
    return total, companion, total - companion


def derive_binary(model, spin_derived: dict | None = None, distance=None,
                  median_error_us: float | None = None) -> dict | None:
    """The ``derived_binary`` report section, or None without a binary
    (``median_error_us``: the TOAs' median error, for the model's cautions)."""
    binary = _binary_of(model)
    if binary is None:
        return None
    out: dict = {}
    cautions: list[str] = []
    period_days, period_err_days = _value_err(binary, "orbital_period_days")
    x, sx = _value_err(binary, "projected_semi_major_axis_lt_s")
    e, se = _eccentricity(binary)
    if x > 0:
        f = dbin.mass_function(x, period_days, projected_semi_major_axis_err_lt_s=sx,
                               orbital_period_err_days=period_err_days)
        out["mass_function_msun"] = f
        out["minimum_companion_mass_msun"] = dbin.minimum_companion_mass(
            f["value"], mass_function_err_msun=f["uncertainty"])
        out["median_companion_mass_msun"] = dbin.companion_mass(
            f["value"], inclination_deg=60.0, mass_function_err_msun=f["uncertainty"])
        cautions.append("minimum / median companion masses assume a 1.4 M_sun pulsar and "
                        "sin i = 1 / i = 60 deg (common practice)")
    advance_deg_per_yr, advance_err = _value_err(binary, "periastron_advance_deg_per_yr")
    if advance_deg_per_yr > 0 and e > 0:
        out["total_mass_msun"] = dbin.total_mass_from_periastron_advance(
            advance_deg_per_yr, period_days, e, periastron_advance_err_deg_per_yr=advance_err,
            orbital_period_err_days=period_err_days,
            eccentricity_err=se)
        cautions.append("total mass assumes the periastron advance is purely relativistic")
    einstein_s, einstein_err_s = _value_err(binary, "einstein_delay_amplitude_s")
    period_dot, period_dot_err = _value_err(binary, "orbital_period_derivative")
    if "total_mass_msun" in out and einstein_s > 0:
        inputs = [(advance_deg_per_yr, advance_err), (einstein_s, einstein_err_s), (e, se)]
        _masses_from_einstein(out, inputs, period_days, period_dot, period_dot_err)
    shapiro = binary.orbit.shapiro
    if shapiro is not None and shapiro.range_s > 0:
        range_key, shape_key = shapiro.names
        r, sr = _value_err(binary, range_key)
        s, ss = _value_err(binary, shape_key)
        scale = 1.0 if binary.mass_form else 1.0 / SOLAR_MASS_TIME_S
        out["companion_mass_from_shapiro_msun"] = quantity(
            r * scale, None if sr is None else sr * scale, "M_sun",
            "companion Shapiro delay range r = G m_c / c^3 (GR)")
        out["sin_inclination_from_shapiro"] = quantity(s, ss, "", "Shapiro shape s = sin i (GR)")
    if distance is not None:
        _orbital_kinematics(out, binary, period_days, period_dot, period_dot_err, distance)
    if binary.model == "low_eccentricity":
        cautions.extend(binary.warnings(median_error_us))
    return {"model": binary.model, "quantities": out, "cautions": cautions}


def _masses_from_einstein(out, inputs, period_days, period_dot, period_dot_err):
    """``inputs``: (value, uncertainty) of the periastron advance (deg/yr), the
    Einstein amplitude (s) and the eccentricity."""
    (advance_deg_per_yr, _), (einstein_s, _), (e, _) = inputs
    total, mc, mp = masses_from_advance_and_einstein(advance_deg_per_yr, einstein_s,
                                                     period_days, e)
    if not (mc > 0 and mp > 0):
        out["pulsar_mass_msun"] = quantity(None, None, "M_sun", "GR from periastron advance "
                                           "and Einstein amplitude",
                                           "no positive masses for these values")
        return
    # first-order propagation by central differences over (advance, Einstein amplitude, e)
    jac = np.zeros((2, 3))
    for j, (v, _) in enumerate(inputs):
        h = abs(v) * 1e-6 or 1e-12
        args_p = [a for a, _ in inputs]
        args_m = list(args_p)
        args_p[j] += h
        args_m[j] -= h
        plus = masses_from_advance_and_einstein(args_p[0], args_p[1], period_days, args_p[2])
        minus = masses_from_advance_and_einstein(args_m[0], args_m[1], period_days, args_m[2])
        jac[:, j] = [(plus[2] - minus[2]) / (2 * h), (plus[1] - minus[1]) / (2 * h)]
    have = any(s is not None for _, s in inputs)
    cov = jac @ np.diag([(s or 0.0) ** 2 for _, s in inputs]) @ jac.T if have else None
    sig = (None, None) if cov is None else tuple(np.sqrt(np.diag(cov)))
    why = ("GR: total mass from the periastron advance, companion mass from the Einstein "
           "amplitude at that total mass (Taylor & Weisberg 1989)")
    out["pulsar_mass_msun"] = quantity(mp, sig[0], "M_sun", why)
    out["companion_mass_msun"] = quantity(mc, sig[1], "M_sun", why)
    decay = dbin.orbital_decay_gr(mp, mc, period_days, e, mass_covariance=cov)
    out["orbital_period_derivative_gr"] = decay
    if period_dot != 0:
        err = None
        if period_dot_err is not None and decay["uncertainty"] is not None:
            err = abs(period_dot / decay["value"]) * math.hypot(period_dot_err / period_dot,
                                                           decay["uncertainty"] / decay["value"])
        out["orbital_period_derivative_observed_over_gr"] = quantity(
            period_dot / decay["value"], err, "",
            "observed orbital period derivative over the GR prediction (kinematic terms not "
            "removed)")


def distance_for(model, result=None) -> dict | None:
    """The distance used for kinematic terms: ``distance_kpc`` of [position]
    if given, else 1 / parallax. Returns {value_kpc, uncertainty_kpc, source}."""
    astro = model.astrometry
    if astro.distance_kpc is not None:
        return {"value_kpc": astro.distance_kpc, "uncertainty_kpc": astro.distance_uncertainty_kpc,
                "source": "position.distance_kpc"}
    parallax_mas, parallax_err_mas = astro.parallax.value, astro.parallax.uncertainty
    if parallax_mas > 0:
        err = None if parallax_err_mas is None else parallax_err_mas / parallax_mas ** 2
        return {"value_kpc": 1.0 / parallax_mas, "uncertainty_kpc": err,
                "source": "1 / parallax (no Lutz-Kelker or other bias correction)"}
    return None


def _proper_motion(model, result=None):
    icrs = model.astrometry.icrs_position(result)
    mu_a, mu_d = icrs["pm_lon_coslat"], icrs["pm_lat"]
    mu = math.hypot(mu_a, mu_d)
    err = None
    if "pm_lon_coslat_err" in icrs and mu > 0:
        err = math.hypot(mu_a * icrs["pm_lon_coslat_err"], mu_d * icrs["pm_lat_err"]) / mu
        err = err or None          # a proper motion held fixed is not measured: no "± 0"
    l_deg, b_deg = dbin.galactic_from_icrs(math.degrees(icrs["lon_rad"]),
                                           math.degrees(icrs["lat_rad"]))
    return mu, err, l_deg, b_deg


def _orbital_kinematics(out, binary, period_days, period_dot, period_dot_err, distance):
    mu, smu, l_deg, b_deg = distance["proper_motion"]
    d, sd = distance["value_kpc"], distance["uncertainty_kpc"]
    period_s = period_days * SECONDS_PER_DAY
    shk, gal, intrinsic, unc = dbin.remove_kinematic_terms(
        period_s, period_dot, mu, d, l_deg, b_deg, observed_err=period_dot_err,
        proper_motion_err_mas_per_yr=smu, distance_err_kpc=sd)
    out["orbital_period_derivative_shklovskii"] = shk
    out["orbital_period_derivative_galactic"] = gal
    out["orbital_period_derivative_intrinsic"] = quantity(
        intrinsic, unc, "s/s",
        f"observed minus Shklovskii minus Galactic terms (distance: {distance['source']}; its "
        "error enters both terms, propagated jointly)")
    gr = out.get("orbital_period_derivative_gr")
    if gr is not None and gr["value"]:
        out["orbital_period_derivative_intrinsic_over_gr"] = quantity(
            intrinsic / gr["value"], None, "", "intrinsic over GR-predicted orbital decay")


def derive_kinematic(model, spin_derived: dict | None, distance) -> dict | None:
    """Kinematic terms of the spin period derivative (``derived_kinematic``)."""
    if distance is None or spin_derived is None:
        return None
    mu, smu, l_deg, b_deg = distance["proper_motion"]
    p = spin_derived.get("period_s", {}).get("value")
    pdot_q = spin_derived.get("period_derivative", {})
    if not p or mu == 0 or pdot_q.get("value") is None:
        return None
    res = dbin.intrinsic_spin(p, pdot_q["value"], proper_motion_mas_per_yr=mu,
                              distance_kpc=distance["value_kpc"], galactic_longitude_deg=l_deg,
                              galactic_latitude_deg=b_deg,
                              period_derivative_err=pdot_q.get("uncertainty"),
                              proper_motion_err_mas_per_yr=smu,
                              distance_err_kpc=distance["uncertainty_kpc"])
    return {"distance_kpc": distance["value_kpc"],
            "distance_uncertainty_kpc": distance["uncertainty_kpc"],
            "distance_source": distance["source"],
            "total_proper_motion_mas_per_yr": mu, "total_proper_motion_uncertainty": smu,
            "galactic_longitude_deg": l_deg, "galactic_latitude_deg": b_deg,
            "quantities": res,
            "cautions": ["kinematic corrections assume the distance above and the Galactic "
                         f"model of Damour & Taylor 1991 with {dbin.GALACTIC_CONSTANTS['source']}"]}


def extra_report_sections(model, spin_derived: dict | None, result=None,
                          median_error_us: float | None = None) -> dict:
    """Keys added to report.json: ``position`` always, ``derived_binary`` for a
    binary, ``derived_kinematic`` when proper motion and a distance are known."""
    out = {"position": position_summary(model.astrometry, result)}
    distance = distance_for(model, result)
    if distance is not None:
        distance["proper_motion"] = _proper_motion(model, result)
        if distance["proper_motion"][0] == 0:
            distance = None
    binary = derive_binary(model, spin_derived, distance, median_error_us)
    if binary is not None:
        out["derived_binary"] = binary
    kin = derive_kinematic(model, spin_derived, distance)
    if kin is not None:
        out["derived_kinematic"] = kin
    return out


__all__ = ["extra_report_sections", "derive_binary", "derive_kinematic", "distance_for",
           "masses_from_advance_and_einstein"]
