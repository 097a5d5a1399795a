"""Orbit formulae of the binary models: delay and its partial derivatives at
a given (retarded) time, for the three models of ``[binary]``.

Each orbit class evaluates, at times ``dt`` seconds after its epoch (given
as double-double), an :class:`OrbitState` holding the Roemer + Einstein delay
``delay_s`` and its total time derivative ``rate``, and the companion
Shapiro delay (for the models that have it). ``partials(state, names)``
gives d(delay)/d(parameter) at fixed time, per parameter unit of the model
file (days, s/s, light-seconds, degrees, deg/yr, MJD days, seconds, M_sun).
The inversion of the timing formula (retarded time) is done by the caller
(:mod:`timingkit.model.binary`).

Formulae
- Keplerian, Blandford & Teukolsky (1976, ApJ 205, 580):
  D = x sin w (cos E - e) + (x sqrt(1-e^2) cos w + gamma) sin E,
  w = w0 + w_dot (t - t_peri) (linear in time; t_peri the periastron epoch).
- Relativistic, Damour & Deruelle (1986, Ann. Inst. H. Poincare 44, 263),
  as summarised by Taylor & Weisberg (1989, ApJ 345, 434) and Lorimer &
  Kramer (2005, sect. 8.3): the same Roemer/Einstein form with
  w = w0 + k A_e(E), k = w_dot / n, A_e the true anomaly counted over all
  orbits, and the Shapiro delay -2 r ln(1 - e cos E - s [sin w (cos E - e)
  + sqrt(1-e^2) cos w sin E]). The relativistic deformations of the orbit
  (delta_r, delta_theta) and aberration are not included (they are rarely
  measurable and enter at the level of x (v/c)^2).
- Low eccentricity, Lange et al. (2001, MNRAS 326, 274), first order in e:
  D = x [sin P + (k/2) sin 2P - (h/2) cos 2P - 3h/2], P = n (t - T_asc),
  h = e sin w, k = e cos w; Shapiro -2 r ln(1 - s sin P). The constant
  -3h/2 x is kept so the form equals the Keplerian one to first order in e
  (it is otherwise absorbed by the phase offset). Neglected: order x e^2.
Mean anomaly in all three: M = 2 pi [u - Pb_dot u^2 / 2], u = dt / Pb,
formed in double-double so whole orbits cost no precision.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from timingkit.numerics import ddmath
from timingkit.formats.errors import FitError
from timingkit.model.kepler import TWO_PI, solve_kepler, true_anomaly, wrap_angle

SECONDS_PER_DAY = 86400.0
JULIAN_YEAR_S = 365.25 * SECONDS_PER_DAY
DEG = math.pi / 180.0
DEG_PER_YR_TO_RAD_PER_S = DEG / JULIAN_YEAR_S
# GM_sun / c^3 in seconds (IAU 2015 Resolution B3 nominal solar mass parameter).
SOLAR_MASS_TIME_S = 4.925490947e-6


@dataclass
class MeanAnomaly:
    wrapped: np.ndarray       # rad, in [-pi, pi)
    turns: np.ndarray         # whole orbits since the epoch
    dt: np.ndarray            # seconds since the epoch (double)
    orbits: np.ndarray        # dt / Pb (double)
    d_dt: np.ndarray          # dM/d(dt), rad/s
    d_period_days: np.ndarray # dM/dPb, rad/day
    d_period_dot: np.ndarray       # dM/d(orbital period derivative), rad

    @property
    def cycles(self) -> np.ndarray:
        return self.turns + self.wrapped / TWO_PI


def mean_anomaly(dt_hi, dt_lo, period_days: float, period_dot: float) -> MeanAnomaly:
    period_s = period_days * SECONDS_PER_DAY
    q_hi, q_lo = ddmath.dd_div_d(dt_hi, dt_lo, period_s)
    whole = np.round(q_hi)
    frac = (q_hi - whole) + q_lo
    orbits = q_hi + q_lo
    m, k = wrap_angle(TWO_PI * frac - math.pi * period_dot * orbits ** 2)
    n = TWO_PI / period_s
    return MeanAnomaly(
        wrapped=m, turns=whole + k, dt=dt_hi + dt_lo, orbits=orbits,
        d_dt=n * (1.0 - period_dot * orbits),
        d_period_days=n * (-orbits + period_dot * orbits ** 2) * SECONDS_PER_DAY,
        d_period_dot=-math.pi * orbits ** 2)


@dataclass
class OrbitState:
    anomaly: MeanAnomaly
    delay_s: np.ndarray                  # Roemer + Einstein (no Shapiro)
    rate: np.ndarray                     # d(delay_s)/dt at fixed parameters
    shapiro_s: np.ndarray | None = None
    shapiro_rate: np.ndarray | None = None
    eccentric_anomaly: np.ndarray | None = None
    work: dict = field(default_factory=dict)


# --------------------------------------------------------------------- helpers

def _shapiro_log(r, s, argument, param):
    if np.any(argument <= 0):
        raise FitError(f"companion Shapiro delay undefined: 1 - s sin(...) <= 0 "
                       f"(shapiro shape s = {s:.6g} must stay below 1); check {param}")
    return -2.0 * r * np.log(argument)


class ShapiroForm:
    """Shapiro range r (s) and shape s, given directly or as companion mass
    (M_sun) and sin i (r = T_sun m_c, s = sin i)."""

    def __init__(self, params: dict, mass_form: bool):
        self.mass_form = mass_form
        self.params = params

    @property
    def range_s(self) -> float:
        if self.mass_form:
            return SOLAR_MASS_TIME_S * self.params["companion_mass_msun"].value
        return self.params["shapiro_range_s"].value

    @property
    def shape(self) -> float:
        key = "sin_inclination" if self.mass_form else "shapiro_shape"
        return self.params[key].value

    @property
    def names(self) -> tuple[str, str]:
        return (("companion_mass_msun", "sin_inclination") if self.mass_form else
                ("shapiro_range_s", "shapiro_shape"))

    def parameter_partials(self, d_range, d_shape) -> dict:
        a, b = self.names
        scale = SOLAR_MASS_TIME_S if self.mass_form else 1.0
        return {a: d_range * scale, b: d_shape}


# ----------------------------------------------------------- eccentric orbits

class EccentricOrbit:
    """Keplerian (``advance='linear'``) or relativistic (``advance='true_anomaly'``)."""

    epoch_key = "periastron_epoch_mjd"

    def __init__(self, params: dict, advance: str, shapiro: ShapiroForm | None):
        self.p = params
        self.advance = advance
        self.shapiro = shapiro

    def _v(self, key):
        return self.p[key].value if key in self.p else 0.0

    def state(self, dt_hi, dt_lo, guess=None) -> OrbitState:
        period_days = self._v("orbital_period_days")
        ma = mean_anomaly(dt_hi, dt_lo, period_days, self._v("orbital_period_derivative"))
        dt = ma.dt
        e = self._v("eccentricity") + self._v("eccentricity_derivative_per_s") * dt
        if np.any(e < 0) or np.any(e >= 1):
            raise FitError(f"binary.eccentricity left [0, 1) (range {e.min():.3g} to "
                           f"{e.max():.3g}); for near-circular orbits use "
                           "model = \"low_eccentricity\"")
        x = self._v("projected_semi_major_axis_lt_s") + \
            self._v("projected_semi_major_axis_derivative_lt_s_per_s") * dt
        g = None
        if guess is not None:   # the previous state: move its E by dM / (1 - e cos E)
            prev = guess.anomaly
            d_m = (ma.wrapped - prev.wrapped) + TWO_PI * (ma.turns - prev.turns)
            g = guess.work["anomaly_wrapped"] + TWO_PI * (prev.turns - ma.turns) \
                + d_m / guess.work["den"]
        ecc_anomaly = solve_kepler(ma.wrapped, e, g)
        s_e, c_e = np.sin(ecc_anomaly), np.cos(ecc_anomaly)
        den = 1.0 - e * c_e
        r1 = np.sqrt(1.0 - e * e)
        advance_rad_per_s = self._v("periastron_advance_deg_per_yr") * DEG_PER_YR_TO_RAD_PER_S
        w0 = self._v("periastron_longitude_deg") * DEG
        period_s = period_days * SECONDS_PER_DAY
        if self.advance == "linear":
            omega = w0 + advance_rad_per_s * dt
            w_e_anom = w_ecc = 0.0
            nu = None
        else:
            k = advance_rad_per_s * period_s / TWO_PI
            nu = true_anomaly(ecc_anomaly, e) + TWO_PI * ma.turns
            omega = w0 + k * nu
            w_e_anom = k * r1 / den
            w_ecc = k * s_e / (r1 * den)
        s_w, c_w = np.sin(omega), np.cos(omega)
        einstein_s = self._v("einstein_delay_amplitude_s")
        rho = s_w * (c_e - e) + r1 * c_w * s_e
        rho_E = -s_w * s_e + r1 * c_w * c_e
        rho_e = -s_w - e / r1 * c_w * s_e
        rho_w = c_w * (c_e - e) - r1 * s_w * s_e
        work = dict(anomaly_wrapped=ecc_anomaly, e=e, x=x, den=den, r1=r1, s_e=s_e, c_e=c_e,
                    nu=nu, w_e_anom=w_e_anom, w_ecc=w_ecc, advance_rad_per_s=advance_rad_per_s,
                    rho=rho, rho_E=rho_E, rho_e=rho_e, rho_w=rho_w, period_s=period_s)
        delay = x * rho + einstein_s * s_e
        sens = dict(E=x * rho_E + einstein_s * c_e, e=x * rho_e, w=x * rho_w, x=rho)
        work["sens"] = sens
        st = OrbitState(anomaly=ma, delay_s=delay, rate=self._rate(sens, work, ma),
                        eccentric_anomaly=ecc_anomaly + TWO_PI * ma.turns, work=work)
        if self.shapiro is not None:
            r, s = self.shapiro.range_s, self.shapiro.shape
            arg = 1.0 - e * c_e - s * rho
            st.shapiro_s = _shapiro_log(r, s, arg, "binary." + self.shapiro.names[1])
            ssens = dict(E=-2.0 * r * (e * s_e - s * rho_E) / arg,
                         e=-2.0 * r * (-c_e - s * rho_e) / arg,
                         w=2.0 * r * s * rho_w / arg, x=0.0)
            work["ssens"] = ssens
            work["s_arg"] = arg
            st.shapiro_rate = self._rate(ssens, work, ma)
        return st

    def _chain(self, sens, work, ma):
        """d/dM and d/de(t) of a function with partials ``sens`` in E, e, w, x."""
        a = sens["E"] + sens["w"] * work["w_e_anom"]
        d_m = a / work["den"]
        d_e = a * work["s_e"] / work["den"] + sens["e"] + sens["w"] * work["w_ecc"]
        return d_m, d_e

    def _rate(self, sens, work, ma):
        d_m, d_e = self._chain(sens, work, ma)
        rate = d_m * ma.d_dt + d_e * self._v("eccentricity_derivative_per_s") \
            + sens["x"] * self._v("projected_semi_major_axis_derivative_lt_s_per_s")
        if self.advance == "linear":
            rate = rate + sens["w"] * work["advance_rad_per_s"]
        return rate

    def _partials_of(self, sens, work, ma, rate, names, explicit) -> dict:
        d_m, d_e = self._chain(sens, work, ma)
        dt = ma.dt
        out = {}
        wanted = set(names)

        def put(key, value):
            if key in wanted:
                out[key] = value

        extra_period = 0.0
        if self.advance == "true_anomaly":
            extra_period = (sens["w"] * work["nu"] * work["advance_rad_per_s"]
                            * SECONDS_PER_DAY / TWO_PI)
        put("orbital_period_days", d_m * ma.d_period_days + extra_period)
        put("orbital_period_derivative", d_m * ma.d_period_dot)
        put("projected_semi_major_axis_lt_s", sens["x"] + 0.0 * dt)
        put("projected_semi_major_axis_derivative_lt_s_per_s", sens["x"] * dt)
        put("eccentricity", d_e)
        put("eccentricity_derivative_per_s", d_e * dt)
        put("periastron_longitude_deg", sens["w"] * DEG)
        if self.advance == "linear":
            put("periastron_advance_deg_per_yr", sens["w"] * DEG_PER_YR_TO_RAD_PER_S * dt)
        else:
            put("periastron_advance_deg_per_yr",
                sens["w"] * work["nu"] * DEG_PER_YR_TO_RAD_PER_S * work["period_s"] / TWO_PI)
        put(self.epoch_key, -SECONDS_PER_DAY * rate)
        for key, value in explicit.items():
            put(key, value)
        return out

    def partials(self, st: OrbitState, names) -> dict:
        w = st.work
        return self._partials_of(w["sens"], w, st.anomaly, st.rate, names,
                                 {"einstein_delay_amplitude_s": w["s_e"]})

    def shapiro_partials(self, st: OrbitState, names) -> dict:
        w = st.work
        arg = w["s_arg"]
        r = self.shapiro.range_s
        explicit = self.shapiro.parameter_partials(-2.0 * np.log(arg), 2.0 * r * w["rho"] / arg)
        out = self._partials_of(w["ssens"], w, st.anomaly, st.shapiro_rate, names, explicit)
        for key in ("projected_semi_major_axis_lt_s",
                    "projected_semi_major_axis_derivative_lt_s_per_s"):
            out.pop(key, None)
        return out


# ----------------------------------------------------------- low eccentricity

class LowEccentricityOrbit:
    epoch_key = "ascending_node_epoch_mjd"

    def __init__(self, params: dict, shapiro: ShapiroForm):
        self.p = params
        self.shapiro = shapiro

    def _v(self, key):
        return self.p[key].value if key in self.p else 0.0

    def state(self, dt_hi, dt_lo, guess=None) -> OrbitState:
        ma = mean_anomaly(dt_hi, dt_lo, self._v("orbital_period_days"),
                          self._v("orbital_period_derivative"))
        dt = ma.dt
        x = self._v("projected_semi_major_axis_lt_s") + \
            self._v("projected_semi_major_axis_derivative_lt_s_per_s") * dt
        eta = self._v("e_sin_omega") + self._v("e_sin_omega_derivative_per_s") * dt
        kappa = self._v("e_cos_omega") + self._v("e_cos_omega_derivative_per_s") * dt
        phi = ma.wrapped
        s1, c1 = np.sin(phi), np.cos(phi)
        s2, c2 = 2.0 * s1 * c1, c1 * c1 - s1 * s1
        bracket = s1 + 0.5 * kappa * s2 - 0.5 * eta * c2 - 1.5 * eta
        sens = dict(phi=x * (c1 + kappa * c2 + eta * s2), x=bracket,
                    eta=x * (-0.5 * c2 - 1.5), kappa=0.5 * x * s2)
        work = dict(s1=s1, c1=c1, sens=sens)
        st = OrbitState(anomaly=ma, delay_s=x * bracket, rate=self._rate(sens, ma), work=work)
        r, s = self.shapiro.range_s, self.shapiro.shape
        arg = 1.0 - s * s1
        st.shapiro_s = _shapiro_log(r, s, arg, "binary." + self.shapiro.names[1])
        ssens = dict(phi=2.0 * r * s * c1 / arg, x=0.0, eta=0.0, kappa=0.0)
        work["ssens"] = ssens
        work["s_arg"] = arg
        st.shapiro_rate = self._rate(ssens, ma)
        return st

    def _rate(self, sens, ma):
        return (sens["phi"] * ma.d_dt
                + sens["x"] * self._v("projected_semi_major_axis_derivative_lt_s_per_s")
                + sens["eta"] * self._v("e_sin_omega_derivative_per_s")
                + sens["kappa"] * self._v("e_cos_omega_derivative_per_s"))

    def _partials_of(self, sens, ma, rate, names, explicit) -> dict:
        dt = ma.dt
        table = {
            "orbital_period_days": lambda: sens["phi"] * ma.d_period_days,
            "orbital_period_derivative": lambda: sens["phi"] * ma.d_period_dot,
            "projected_semi_major_axis_lt_s": lambda: sens["x"] + 0.0 * dt,
            "projected_semi_major_axis_derivative_lt_s_per_s": lambda: sens["x"] * dt,
            "e_sin_omega": lambda: sens["eta"] + 0.0 * dt,
            "e_sin_omega_derivative_per_s": lambda: sens["eta"] * dt,
            "e_cos_omega": lambda: sens["kappa"] + 0.0 * dt,
            "e_cos_omega_derivative_per_s": lambda: sens["kappa"] * dt,
            self.epoch_key: lambda: -SECONDS_PER_DAY * rate,
        }
        out = {k: f() for k, f in table.items() if k in names}
        out.update({k: v for k, v in explicit.items() if k in names})
        return out

    def partials(self, st: OrbitState, names) -> dict:
        return self._partials_of(st.work["sens"], st.anomaly, st.rate, names, {})

    def shapiro_partials(self, st: OrbitState, names) -> dict:
        w = st.work
        arg = w["s_arg"]
        r = self.shapiro.range_s
        explicit = self.shapiro.parameter_partials(-2.0 * np.log(arg), 2.0 * r * w["s1"] / arg)
        out = self._partials_of(w["ssens"], st.anomaly, st.shapiro_rate, names, explicit)
        for key in ("projected_semi_major_axis_lt_s", "e_sin_omega", "e_cos_omega",
                    "projected_semi_major_axis_derivative_lt_s_per_s",
                    "e_sin_omega_derivative_per_s", "e_cos_omega_derivative_per_s"):
            out.pop(key, None)
        return out


__all__ = ["EccentricOrbit", "LowEccentricityOrbit", "ShapiroForm", "OrbitState",
           "mean_anomaly", "SOLAR_MASS_TIME_S"]
