"""Derived spin quantities of a pulsar with propagated uncertainties.

From the spin frequency nu (Hz) and its derivatives nu_dot (Hz/s), nu_ddot
(Hz/s^2) this module gives period, period derivative, characteristic age,
inferred surface and light-cylinder dipole fields, spin-down luminosity and
braking index, following Lorimer & Kramer (2005), *Handbook of Pulsar
Astronomy*, ch. 3.  Every quantity is returned as a small dict

    {"value": float | None, "uncertainty": float | None, "unit": str,
     "assumptions": str, "note": str | None}

so it drops straight into ``report.json`` (DESIGN.md section 5).  A value is
None (with a note saying why) where the physics does not apply, e.g. the
age of a pulsar that spins up.  Uncertainties are first-order (linear)
propagation of the supplied covariance through analytic Jacobians; they are
good while the relative uncertainties are small (say < 10 %).

Pure functions on floats and numpy; no other timingkit module is needed.
"""

from __future__ import annotations

import math
from typing import Any, Sequence

import numpy as np

from timingkit.formats.errors import InputError

# --- constants (cgs unless stated) -----------------------------------------
SPEED_OF_LIGHT_CM_PER_S = 2.99792458e10       # exact (SI definition)
SECONDS_PER_JULIAN_YEAR = 365.25 * 86400.0    # IAU Julian year
MOMENT_OF_INERTIA_G_CM2 = 1.0e45              # canonical neutron star
NEUTRON_STAR_RADIUS_CM = 1.0e6                # 10 km

# Surface dipole field B_s = K sqrt(P Pdot) gauss.  K = sqrt(3 c^3 I /
# (8 pi^2 R^6)) = 3.1996e19 G s^-1/2 for I = 1e45 g cm^2 and R = 10 km;
# the handbook (Lorimer & Kramer 2005, eq. 3.15) and the pulsar catalogue
# round it to 3.2e19, and so do we so that our numbers compare directly.
SURFACE_FIELD_COEFF_GAUSS = 3.2e19

# Field at the light cylinder for a dipole falling off as r^-3:
# B_lc = B_s (R / R_lc)^3 with R_lc = c P / (2 pi), hence
# B_lc = K R^3 (2 pi / c)^3 P^-5/2 Pdot^1/2 = 2.946e8 G P^-5/2 Pdot^1/2
# (P in s), i.e. 9.32 G P^-5/2 (Pdot / 1e-15)^1/2.  The handbook gives a
# rounded coefficient for that normalised form (Lorimer & Kramer 2005, ch. 3,
# beside eq. 3.15); we derive the constant from R, K and c above instead.
LIGHT_CYLINDER_FIELD_COEFF_GAUSS = (
    SURFACE_FIELD_COEFF_GAUSS * NEUTRON_STAR_RADIUS_CM ** 3
    * (2.0 * math.pi / SPEED_OF_LIGHT_CM_PER_S) ** 3)

GAUSS_PER_TESLA = 1.0e4

ASSUMPTIONS = (
    "Magnetic fields, spin-down luminosity and characteristic age assume a "
    "centred, orthogonal magnetic dipole rotating in vacuum, neutron-star "
    "radius R = 10 km and moment of inertia I = 1e45 g cm^2; the "
    "characteristic age further assumes braking index n = 3 and a birth "
    "period much shorter than today's. The period derivative is the observed "
    "one: kinematic terms (Shklovskii, Galactic acceleration) are not "
    "removed. Formulae: Lorimer & Kramer (2005), Handbook of Pulsar "
    "Astronomy, ch. 3.")

_DIPOLE = ("centred orthogonal dipole in vacuum, R = 10 km, I = 1e45 g cm^2; "
           "observed period derivative")
_ASSUME = {
    "period_s": "none: P = 1/nu",
    "period_derivative": "observed value, Pdot = -nu_dot/nu^2; kinematic "
                         "contributions (Shklovskii, Galactic) not removed",
    "characteristic_age_yr": "tau = P/(2 Pdot): braking index 3, birth period "
                             "much shorter than P, observed period derivative",
    "surface_dipole_field_gauss": "B = 3.2e19 sqrt(P Pdot) G at the magnetic "
                                  "equator: " + _DIPOLE,
    "surface_dipole_field_tesla": "B = 3.2e15 sqrt(P Pdot) T at the magnetic "
                                  "equator: " + _DIPOLE,
    "spin_down_luminosity_erg_per_s": "Edot = 4 pi^2 I Pdot / P^3 with "
                                      "I = 1e45 g cm^2; all spin-down is loss "
                                      "of rotational energy",
    "light_cylinder_field_gauss": "B_lc = B_s (R/R_lc)^3, R_lc = cP/(2 pi): "
                                  "pure dipole out to the light cylinder, "
                                  + _DIPOLE,
    "braking_index": "n = nu nu_ddot / nu_dot^2 from the fitted derivatives; "
                     "timing noise and glitch recovery can dominate nu_ddot",
}
_UNITS = {
    "period_s": "s",
    "period_derivative": "s/s",
    "characteristic_age_yr": "yr",
    "surface_dipole_field_gauss": "G",
    "surface_dipole_field_tesla": "T",
    "spin_down_luminosity_erg_per_s": "erg/s",
    "light_cylinder_field_gauss": "G",
    "braking_index": "",
}

# Common practice: spin periods below ~30 ms are "recycled" pulsars whose
# small Pdot can be dominated by kinematic terms.
_RECYCLED_PERIOD_S = 0.03
# Common practice: a characteristic age above the age of the Universe
# (13.8 Gyr, Planck 2018) says the age estimate does not apply.
_UNIVERSE_AGE_YR = 1.38e10


def quantity(value: float | None, uncertainty: float | None, unit: str,
             assumptions: str, note: str | None = None) -> dict[str, Any]:
    """One derived quantity in the report shape (plain floats or None)."""
    return {"value": None if value is None else float(value),
            "uncertainty": None if uncertainty is None else float(uncertainty),
            "unit": unit, "assumptions": assumptions, "note": note}


def finite_number(x: Any, field: str) -> float:
    """``x`` as a float; InputError naming ``field`` if it is not a finite number."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        raise InputError(f"expected a number, got {x!r}", field=field) from None
    if not math.isfinite(v):
        raise InputError(f"expected a finite number, got {x!r}", field=field)
    return v


def _check_covariance(covariance: Any, need: int) -> np.ndarray | None:
    """Validate a covariance of (nu, nu_dot, ...); return its leading block."""
    if covariance is None:
        return None
    cov = np.asarray(covariance, dtype=float)
    if cov.ndim != 2 or cov.shape[0] != cov.shape[1] or cov.shape[0] < 1:
        raise InputError(f"covariance must be a square matrix, got shape "
                         f"{cov.shape}", field="covariance")
    if not np.all(np.isfinite(cov)):
        raise InputError("covariance contains NaN or infinity",
                         field="covariance")
    k = min(need, cov.shape[0])
    block = cov[:k, :k]
    scale = np.sqrt(np.abs(np.outer(np.diag(block), np.diag(block)))) + 1e-300
    if np.any(np.diag(block) < 0) or np.max(np.abs(block - block.T) / scale) > 1e-8:
        raise InputError("covariance must be symmetric with a non-negative "
                         "diagonal", field="covariance")
    return block


def _propagate(gradient: Sequence[float], cov: np.ndarray | None) -> float | None:
    """sqrt(g C g^T) for a gradient over the leading parameters of cov.

    Returns None when the covariance is missing or too small for the gradient.
    """
    if cov is None or cov.shape[0] < len(gradient):
        return None
    g = np.asarray(gradient, dtype=float)
    c = cov[:len(g), :len(g)]
    var = float(g @ c @ g)
    return math.sqrt(max(var, 0.0))


def derive_spin(frequency_hz: float, frequency_derivatives: Sequence[float],
                covariance: Any = None,
                measured: Sequence[bool] | None = None) -> dict[str, dict[str, Any]]:
    """Derived spin quantities from nu (Hz) and [nu_dot (Hz/s), nu_ddot, ...].

    ``covariance`` is the covariance matrix of (nu, nu_dot[, nu_ddot, ...]) in
    the same units (extra trailing rows are ignored), or None, which gives
    uncertainties of None.  Returns a dict, in this order, of
    ``period_s, period_derivative, characteristic_age_yr,
    surface_dipole_field_gauss, surface_dipole_field_tesla,
    spin_down_luminosity_erg_per_s, light_cylinder_field_gauss`` and, only
    when nu_ddot is given, ``braking_index``; each in the shape of
    :func:`quantity`. ``measured``: which of (nu, nu_dot, ...) carry an
    uncertainty (default: all); a quantity that depends on an unmeasured one
    gets no uncertainty (not a smaller one). Each is in the shape of
    :func:`quantity`.  A pulsar that spins up (nu_dot >= 0) gets None for the
    quantities that assume magnetic braking, with a note, never a NaN.
    Accuracy: the formulae are exact given their assumptions; the
    uncertainties are first-order.
    """
    nu = finite_number(frequency_hz, "frequency_hz")
    if nu <= 0:
        raise InputError(f"spin frequency must be positive, got {nu!r} Hz",
                         field="frequency_hz")
    derivs = [finite_number(x, f"frequency_derivatives.{i}")
              for i, x in enumerate(frequency_derivatives or [])]
    has_nudot = len(derivs) >= 1
    has_nuddot = len(derivs) >= 2
    nudot = derivs[0] if has_nudot else None
    cov = _check_covariance(covariance, 3 if has_nuddot else 2)

    out: dict[str, dict[str, Any]] = {}

    def put(key, value, gradient=None, note=None):
        unc = None if (value is None or gradient is None) else _propagate(gradient, cov)
        if unc is not None and measured is not None and any(
                g != 0 and not (i < len(measured) and measured[i])
                for i, g in enumerate(gradient)):
            unc = None
        out[key] = quantity(value, unc, _UNITS[key], _ASSUME[key], note)

    # Period: P = 1/nu, dP/dnu = -1/nu^2.
    put("period_s", 1.0 / nu, [-1.0 / nu ** 2])

    braking_keys = ("characteristic_age_yr", "surface_dipole_field_gauss",
                    "surface_dipole_field_tesla",
                    "spin_down_luminosity_erg_per_s",
                    "light_cylinder_field_gauss")
    if not has_nudot:
        note = "no frequency derivative in the model: spin-down not measured"
        put("period_derivative", None, note=note)
        for key in braking_keys:
            put(key, None, note=note)
        return out

    # Pdot = -nu_dot / nu^2: d/dnu = 2 nu_dot / nu^3, d/dnu_dot = -1/nu^2.
    put("period_derivative", -nudot / nu ** 2,
        [2.0 * nudot / nu ** 3, -1.0 / nu ** 2])

    if nudot >= 0:
        if nudot > 0:
            note = ("source spins up (nu_dot > 0): magnetic-braking quantities "
                    "do not apply; the observed spin-up is usually Doppler "
                    "acceleration (globular cluster, companion, Galactic "
                    "potential) or accretion torque")
        else:
            note = "nu_dot = 0: no measured spin-down"
        for key in braking_keys:
            put(key, None, note=note)
        if has_nuddot:
            put("braking_index", None, note=note)
        return out

    # Power laws f = A nu^a (-nu_dot)^b have d f/d nu = a f / nu and
    # d f / d nu_dot = b f / nu_dot (nu_dot < 0 here).
    def power_gradient(f, a, b):
        return [a * f / nu, b * f / nudot]

    # tau = P / (2 Pdot) = -nu / (2 nu_dot) seconds.
    tau_yr = -nu / (2.0 * nudot) / SECONDS_PER_JULIAN_YEAR
    put("characteristic_age_yr", tau_yr, power_gradient(tau_yr, 1.0, -1.0))

    # B_s = K sqrt(P Pdot) = K (-nu_dot)^1/2 nu^-3/2.
    b_gauss = SURFACE_FIELD_COEFF_GAUSS * math.sqrt(-nudot / nu ** 3)
    put("surface_dipole_field_gauss", b_gauss,
        power_gradient(b_gauss, -1.5, 0.5))
    b_tesla = b_gauss / GAUSS_PER_TESLA
    put("surface_dipole_field_tesla", b_tesla,
        power_gradient(b_tesla, -1.5, 0.5))

    # Edot = 4 pi^2 I Pdot / P^3 = -4 pi^2 I nu nu_dot.
    luminosity_erg_per_s = -4.0 * math.pi ** 2 * MOMENT_OF_INERTIA_G_CM2 * nu * nudot
    put("spin_down_luminosity_erg_per_s", luminosity_erg_per_s,
        power_gradient(luminosity_erg_per_s, 1.0, 1.0))

    # B_lc = K_lc P^-5/2 Pdot^1/2 = K_lc nu^3/2 (-nu_dot)^1/2.
    b_lc = LIGHT_CYLINDER_FIELD_COEFF_GAUSS * math.sqrt(-nudot * nu ** 3)
    put("light_cylinder_field_gauss", b_lc, power_gradient(b_lc, 1.5, 0.5))

    if has_nuddot:
        nuddot = derivs[1]
        # n = nu nu_ddot / nu_dot^2.
        n = nu * nuddot / nudot ** 2
        grad = [nuddot / nudot ** 2, -2.0 * n / nudot, nu / nudot ** 2]
        note = None
        if cov is not None and cov.shape[0] < 3:
            note = "covariance does not include nu_ddot: no uncertainty"
        put("braking_index", n, grad, note=note)
    return out


def spin_from_period(period_s: float, period_derivative: float,
                     covariance: Any = None) -> tuple[float, list[float], np.ndarray | None]:
    """Convert (P [s], Pdot [s/s]) and their 2x2 covariance to
    (nu [Hz], [nu_dot [Hz/s]], covariance of (nu, nu_dot)). Exact transform;
    the covariance is propagated to first order."""
    p = finite_number(period_s, "period_s")
    pdot = finite_number(period_derivative, "period_derivative")
    if p <= 0:
        raise InputError(f"period must be positive, got {p!r} s", field="period_s")
    nu, nudot = 1.0 / p, -pdot / p ** 2
    cov = _check_covariance(covariance, 2)
    if cov is not None:
        if cov.shape[0] < 2:
            raise InputError("covariance of (P, Pdot) must be 2x2",
                             field="covariance")
        jac = np.array([[-1.0 / p ** 2, 0.0],
                        [2.0 * pdot / p ** 3, -1.0 / p ** 2]])
        cov = jac @ cov @ jac.T
    return nu, [nudot], cov


def derive_spin_from_period(period_s: float, period_derivative: float,
                            covariance: Any = None) -> dict[str, dict[str, Any]]:
    """:func:`derive_spin` for a pulsar given by P (s), Pdot (s/s) and the
    covariance of (P, Pdot) (or None)."""
    nu, derivs, cov = spin_from_period(period_s, period_derivative, covariance)
    return derive_spin(nu, derivs, cov)


def period_derivative_from(frequency_hz: float, frequency_derivative_hz_per_s: float) -> float:
    """Pdot = -nu_dot / nu^2 (s/s)."""
    return -float(frequency_derivative_hz_per_s) / float(frequency_hz) ** 2


def _significance(q: dict[str, Any]) -> float | None:
    if q.get("value") is None or not q.get("uncertainty"):
        return None
    return abs(q["value"]) / q["uncertainty"]


def cautions_for(derived: dict[str, dict[str, Any]]) -> list[str]:
    """Plain-language cautions for a result of :func:`derive_spin`.

    Always states the model assumptions; adds notes for quantities that could
    not be given, for an insignificant period derivative, for recycled
    pulsars (kinematic Pdot terms), for ages beyond the age of the Universe
    and for braking indices of young pulsars.
    """
    cautions = [ASSUMPTIONS]
    notes = []
    for key, q in derived.items():
        note = q.get("note")
        if note and note not in notes:
            notes.append(note)
    for note in notes:
        affected = [k for k, q in derived.items() if q.get("note") == note]
        cautions.append(f"{', '.join(affected)}: {note}")

    pdot = derived.get("period_derivative", {})
    sig = _significance(pdot)
    if pdot.get("value") is not None and pdot["value"] > 0 and sig is not None and sig < 3:
        cautions.append(
            f"period derivative is only {sig:.1f} sigma from zero: age, fields "
            "and spin-down luminosity are poorly constrained (treat as limits)")

    period = derived.get("period_s", {}).get("value")
    if (period is not None and period < _RECYCLED_PERIOD_S
            and pdot.get("value") is not None):
        cautions.append(
            "short-period (recycled) pulsar: the Shklovskii effect and Galactic "
            "or cluster acceleration can be a large part of the observed period "
            "derivative; correct it for them before reading age, field or "
            "luminosity (with proper motion and a distance or parallax in the "
            "model, the kinematic section gives the intrinsic values)")

    age = derived.get("characteristic_age_yr", {}).get("value")
    if age is not None and age > _UNIVERSE_AGE_YR:
        cautions.append(
            f"characteristic age {age:.3g} yr exceeds the age of the Universe: "
            "the observed period derivative is probably reduced by kinematic "
            "terms, or the birth period was close to today's; the true age is "
            "not constrained")

    n = derived.get("braking_index")
    if n is not None and n.get("value") is not None:
        text = ("braking index: in young pulsars the measured second frequency "
                "derivative is often dominated by timing noise and glitch "
                "recovery, so the value is often not the intrinsic braking "
                "index (common practice); trust it only from long, glitch-free "
                "or glitch-corrected data")
        nsig = _significance(n)
        if nsig is not None and nsig < 3:
            text += f"; here it is only {nsig:.1f} sigma from zero"
        if age is not None and age > 1e5 and abs(n["value"]) > 10:
            text += ("; |n| >> 3 in an old pulsar points to timing noise or "
                     "an unmodelled acceleration rather than braking")
        cautions.append(text)
    return cautions
