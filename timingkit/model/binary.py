"""The binary-orbit section: ``[binary] model = ...``.

Models (formulae in :mod:`timingkit.model.binary_orbits`):

- ``"keplerian"``   Blandford & Teukolsky (1976): Roemer + Einstein delay.
- ``"relativistic"`` Damour & Deruelle (1986): periastron advance through the
  true anomaly, orbital period derivative, Einstein amplitude, companion
  Shapiro delay (range/shape, or companion mass / sin i).
- ``"low_eccentricity"`` Lange et al. (2001): e sin w, e cos w and the
  epoch of the ascending node, for near-circular orbits.

Model-file keys (units in the names)::

    [binary]
    model = "relativistic"
    orbital_period_days = "0.7843"             # all models (an invented source)
    orbital_period_derivative = -1.1e-13       # s/s
    projected_semi_major_axis_lt_s = 2.876
    projected_semi_major_axis_derivative_lt_s_per_s = 0.0
    eccentricity = 0.392                       # keplerian, relativistic
    eccentricity_derivative_per_s = 0.0
    periastron_longitude_deg = 148.5
    periastron_advance_deg_per_yr = 0.684
    periastron_epoch_mjd = "55000.2"
    einstein_delay_amplitude_s = 0.0036
    shapiro_range_s = 6.6e-6                   # relativistic, low_eccentricity
    shapiro_shape = 0.95                       #   (or companion_mass_msun + sin_inclination)
    # low_eccentricity instead of eccentricity/periastron_*:
    # e_sin_omega, e_cos_omega, e_sin_omega_derivative_per_s,
    # e_cos_omega_derivative_per_s, ascending_node_epoch_mjd

Timing formula: the arrival time at the barycentre t and the emission time T
obey t = T + D(T) + S(t) with D the Roemer + Einstein delay and S the
companion Shapiro delay. D(T) is inverted exactly by Newton's method on T
(to < 1e-7 s of the step, so < 1e-16 s in the delay) rather than by the
series expansions of the original papers; S is evaluated at the orbital
phase of the arrival time, as in Damour & Deruelle's formula. The binary
delay ``ev.binary_s`` = D(T) + S(t), set from ``ev.t_bary``; partial
derivatives are exact for this inversion: d(delay)/dp = dD/dp / (1 + dD/dT)
+ dS/dp.
"""

from __future__ import annotations

import math
from decimal import Decimal

import numpy as np

from timingkit.numerics import ddmath
from timingkit.formats.errors import InputError, excerpt
from timingkit.model.base import ModelSection, Evaluation, notable_delay_s
from timingkit.model.binary_orbits import (DEG_PER_YR_TO_RAD_PER_S, EccentricOrbit,
                                           LowEccentricityOrbit, ShapiroForm, SOLAR_MASS_TIME_S)
from timingkit.model.parameters import Parameter
from timingkit.formats.model_file import Key, take_section

SECTION = "binary"
MODELS = ("keplerian", "relativistic", "low_eccentricity")
NEWTON_STEP_DONE_S = 1e-7
MAX_NEWTON_STEPS = 12

# key -> (unit, description, default, required)
_COMMON = {
    "orbital_period_days": ("days", "orbital period", None, True),
    "orbital_period_derivative": ("s/s", "orbital period derivative", 0.0, False),
    "projected_semi_major_axis_lt_s": ("lt-s", "projected semi-major axis a sin i / c", None,
                                       True),
    "projected_semi_major_axis_derivative_lt_s_per_s": ("lt-s/s",
                                                        "rate of change of a sin i / c", 0.0,
                                                        False),
}
_ECCENTRIC = {
    "eccentricity": ("", "eccentricity", None, True),
    "eccentricity_derivative_per_s": ("1/s", "rate of change of the eccentricity", 0.0, False),
    "periastron_longitude_deg": ("deg", "longitude of periastron", None, True),
    "periastron_advance_deg_per_yr": ("deg/yr", "rate of advance of periastron", 0.0, False),
    "periastron_epoch_mjd": ("MJD (TDB)", "epoch of periastron", None, True),
    "einstein_delay_amplitude_s": ("s", "Einstein delay amplitude (gamma)", 0.0, False),
}
_LOW_E = {
    "e_sin_omega": ("", "eccentricity times sin(longitude of periastron)", 0.0, False),
    "e_cos_omega": ("", "eccentricity times cos(longitude of periastron)", 0.0, False),
    "e_sin_omega_derivative_per_s": ("1/s", "rate of change of e sin(omega)", 0.0, False),
    "e_cos_omega_derivative_per_s": ("1/s", "rate of change of e cos(omega)", 0.0, False),
    "ascending_node_epoch_mjd": ("MJD (TDB)", "epoch of the ascending node", None, True),
}
_SHAPIRO_RANGE = {
    "shapiro_range_s": ("s", "companion Shapiro delay range r = G m_c / c^3", 0.0, False),
    "shapiro_shape": ("", "companion Shapiro delay shape s = sin i", 0.0, False),
}
_SHAPIRO_MASS = {
    "companion_mass_msun": ("M_sun", "companion mass (Shapiro delay)", 0.0, False),
    "sin_inclination": ("", "sine of the orbital inclination (Shapiro delay)", 0.0, False),
}
# Physical ranges (generous: they catch typing errors and absurd values, not rare systems);
# eccentricity, shapiro_shape and sin_inclination are checked in Binary._check
RANGES = {
    "orbital_period_days": {"low": 1e-3, "high": 1e6},          # 86 s to 2700 yr
    "orbital_period_derivative": {"low": -1e-4, "high": 1e-4},
    "projected_semi_major_axis_lt_s": {"low": 0.0, "high": 1e5},
    "projected_semi_major_axis_derivative_lt_s_per_s": {"low": -1e-6, "high": 1e-6},
    "eccentricity_derivative_per_s": {"low": -1e-6, "high": 1e-6},
    "periastron_longitude_deg": {"low": -360.0, "high": 360.0},
    "periastron_advance_deg_per_yr": {"low": -1e4, "high": 1e4},
    "einstein_delay_amplitude_s": {"low": -1.0, "high": 1.0},
    "e_sin_omega": {"low": -0.999999, "high": 0.999999},
    "e_cos_omega": {"low": -0.999999, "high": 0.999999},
    "e_sin_omega_derivative_per_s": {"low": -1e-6, "high": 1e-6},
    "e_cos_omega_derivative_per_s": {"low": -1e-6, "high": 1e-6},
    "shapiro_range_s": {"low": 0.0, "high": 1e-3},             # companion up to ~200 M_sun
    "companion_mass_msun": {"low": 0.0, "high": 200.0},
}
MAX_ORBITAL_SPEED_C = 0.1           # 2 pi x / Pb: far above any binary pulsar (~0.002 c)
EPOCH_KEYS = ("periastron_epoch_mjd", "ascending_node_epoch_mjd")
HIGH_PRECISION_KEYS = ("orbital_period_days", *EPOCH_KEYS)


def model_keys(model: str) -> dict:
    """All keys a ``[binary]`` section of this model may have."""
    keys = dict(_COMMON)
    if model == "low_eccentricity":
        keys.update(_LOW_E)
    else:
        keys.update(_ECCENTRIC)
    if model != "keplerian":
        keys.update(_SHAPIRO_RANGE)
        keys.update(_SHAPIRO_MASS)
    return keys


class Binary(ModelSection):
    section = SECTION
    contribution = "orbit"

    def __init__(self, section: dict, path: str | None):
        if not isinstance(section, dict):
            raise InputError("expected a [binary] table", path=path, field=SECTION)
        model = section.get("model")
        if model not in MODELS:
            raise InputError(f"binary model {excerpt(model)} unknown; legal: {', '.join(MODELS)}",
                             path=path, field="binary.model", quoted=(model,))
        self.model = model
        keys = model_keys(model)
        spec = {"model": Key("text", required=True)}
        for key, (unit, _, default, required) in keys.items():
            kind = "decimal" if key in HIGH_PRECISION_KEYS else "number"
            if key in EPOCH_KEYS:
                kind = "mjd"
            spec[key] = Key(kind, required=required, default=default, unit=unit,
                            **RANGES.get(key, {}))
        s = take_section(section, SECTION, spec, path)
        unc = s.get("uncertainty", {})
        self.given = {k for k in section if k in keys}
        mass_form = bool(self.given & set(_SHAPIRO_MASS))
        if mass_form and self.given & set(_SHAPIRO_RANGE):
            raise InputError("give the companion Shapiro delay either as shapiro_range_s / "
                             "shapiro_shape or as companion_mass_msun / sin_inclination, not "
                             "both", path=path, field="binary.companion_mass_msun")
        if model != "keplerian":
            drop = _SHAPIRO_RANGE if mass_form else _SHAPIRO_MASS
            keys = {k: v for k, v in keys.items() if k not in drop}
        self.params: dict[str, Parameter] = {}
        for key, (unit, desc, _, _) in keys.items():
            value = s[key]
            p = Parameter(f"{SECTION}.{key}", 0.0, unit, description=desc,
                          uncertainty=_finite(unc.get(key)),
                          high_precision=key in HIGH_PRECISION_KEYS)
            if key in HIGH_PRECISION_KEYS:
                p.set_decimal(Decimal(value))
            else:
                p.value = float(value)
            self.params[key] = p
        self._check(path)
        shapiro = None
        if model != "keplerian":
            shapiro = ShapiroForm(self.params, mass_form)
        self.mass_form = mass_form
        if model == "low_eccentricity":
            self.orbit = LowEccentricityOrbit(self.params, shapiro)
        else:
            advance = "linear" if model == "keplerian" else "true_anomaly"
            self.orbit = EccentricOrbit(self.params, advance, shapiro)
        self.epoch = self.params[self.orbit.epoch_key]

    def _check(self, path):
        def bad(key, msg):
            raise InputError(msg, path=path, field=f"{SECTION}.{key}")
        p = self.params
        if not p["orbital_period_days"].value > 0:
            bad("orbital_period_days", "orbital period must be > 0 days")
        if not p["projected_semi_major_axis_lt_s"].value >= 0:
            bad("projected_semi_major_axis_lt_s", "projected semi-major axis must be >= 0")
        if "eccentricity" in p and not 0 <= p["eccentricity"].value < 1:
            bad("eccentricity", "eccentricity must lie in [0, 1)")
        speed = (2 * math.pi * p["projected_semi_major_axis_lt_s"].value
                 / (p["orbital_period_days"].value * 86400.0))
        if speed > MAX_ORBITAL_SPEED_C:
            bad("projected_semi_major_axis_lt_s",
                f"this orbit is impossible: a projected speed 2 pi x / Pb of {speed:.3g} c "
                f"(the limit is {MAX_ORBITAL_SPEED_C:g} c); check orbital_period_days and "
                "projected_semi_major_axis_lt_s")
        if "e_sin_omega" in p and math.hypot(p["e_sin_omega"].value, p["e_cos_omega"].value) >= 1:
            bad("e_sin_omega", "e_sin_omega and e_cos_omega give an eccentricity >= 1")
        for key in ("shapiro_shape", "sin_inclination"):
            if key in p and not 0 <= p[key].value < 1:
                bad(key, f"{key} must lie in [0, 1)")
        for key in ("shapiro_range_s", "companion_mass_msun"):
            if key in p and p[key].value < 0:
                bad(key, f"{key} must be >= 0")
        if self.model == "low_eccentricity":
            e = math.hypot(p["e_sin_omega"].value, p["e_cos_omega"].value)
            if e >= 1:
                bad("e_sin_omega", "e_sin_omega^2 + e_cos_omega^2 must be < 1")

    # ------------------------------------------------------------ parameters
    def parameters(self):
        return list(self.params.values())

    def parameter_value(self, key: str) -> float:
        return self.params[key].value if key in self.params else 0.0

    def _epoch_parts(self) -> tuple[float, float]:
        hi, lo = self.epoch.value, self.epoch.value_lo
        day = math.floor(hi)
        return float(day), (hi - day) + lo

    # ------------------------------------------------------------ evaluation
    def apply(self, ev: Evaluation) -> None:
        day, frac = self._epoch_parts()
        hi, lo = ev.t_bary.seconds_since(day, frac)
        arrival = self.orbit.state(hi, lo)
        state = arrival
        delay = np.zeros(len(hi))
        for _ in range(MAX_NEWTON_STEPS):
            # Newton on  delay = D(t - delay)
            new = delay - (delay - state.delay_s) / (1.0 + state.rate)
            step = np.max(np.abs(new - delay)) if len(new) else 0.0
            delay = new
            if step < NEWTON_STEP_DONE_S:
                break
            state = self.orbit.state(*ddmath.dd_add_d(hi, lo, -delay), state)
        else:  # pragma: no cover - converges in 2-4 steps for any physical orbit
            raise ArithmeticError("retarded-time iteration of the binary delay did not converge")
        shapiro = arrival.shapiro_s if arrival.shapiro_s is not None else 0.0
        ev.binary_s = ev.binary_s + delay + shapiro
        ev.extra["binary"] = (state, arrival)
        ev.extra["orbital_phase_cycles"] = state.anomaly.cycles
        # d(t_emit)/d(t_bary) = 1/(1 + dD/dt): delays upstream of the orbit move the
        # emission time by this factor (applied in TimingModel.design_matrix)
        ev.extra["emit_per_bary"] = 1.0 / (1.0 + state.rate)

    def partials(self, ev: Evaluation, names: list[str]) -> dict[str, np.ndarray]:
        """d(t_emit)/d(param) = -d(binary delay)/d(param), seconds per unit."""
        state, arrival = ev.extra["binary"]
        keys = [n.split(".", 1)[1] for n in names]
        d = self.orbit.partials(state, keys)
        scale = 1.0 / (1.0 + state.rate)
        out = {k: v * scale for k, v in d.items()}
        if arrival.shapiro_s is not None:
            for k, v in self.orbit.shapiro_partials(arrival, keys).items():
                out[k] = out.get(k, 0.0) + v
        zero = np.zeros(len(ev.obs))
        return {f"{SECTION}.{k}": -(out.get(k, zero) + zero) for k in keys}

    def unconstrained(self, obs, names: list[str]) -> list[str]:
        shapiro = self.orbit.shapiro
        if shapiro is None:
            return []
        range_key, shape_key = shapiro.names
        if f"{SECTION}.{shape_key}" in names and shapiro.range_s == 0:
            return [f"{SECTION}.{shape_key} has no effect while {SECTION}.{range_key} = 0; "
                    "give a non-zero starting value for it"]
        return []

    def to_section(self) -> dict:
        sec = {"model": self.model}
        for key, p in self.params.items():
            if key in self.given or p.value != 0 or p.free or p.uncertainty is not None \
                    or key in ("eccentricity", "e_sin_omega", "e_cos_omega"):
                sec[key] = p.decimal if key in HIGH_PRECISION_KEYS else p.value
        return sec

    def warnings(self, median_error_us: float | None = None) -> list[str]:
        """For low_eccentricity: the neglected third harmonic of the Roemer delay,
        (3/8) x e^2 sin(3 Phi - 2 omega) (the e^2 term of the expansion of the
        Blandford & Teukolsky 1976 delay, which no first-order parameter absorbs),
        when it exceeds 1 ns or a tenth of the median TOA error."""
        out = []
        if self.model == "low_eccentricity":
            e = math.hypot(self.parameter_value("e_sin_omega"), self.parameter_value("e_cos_omega"))
            x = self.parameter_value("projected_semi_major_axis_lt_s")
            neglected = 0.375 * x * e * e
            limit = notable_delay_s(median_error_us)
            if neglected > limit:
                out.append(f"the low_eccentricity model neglects a third harmonic of about "
                           f"0.375 x e^2 = {neglected * 1e9:.3g} ns, more than {limit * 1e9:.3g} ns "
                           "(1 ns or a tenth of the median TOA error); use the eccentric form "
                           "(timingkit convert MODEL --binary-model relativistic -o OUT)")
        return out


def orbital_phase_cycles(ev: Evaluation) -> np.ndarray | None:
    """Mean orbital phase (cycles since the model epoch; from periastron for
    the eccentric models, from the ascending node for low_eccentricity) at
    each TOA's emission time, or None when the model has no binary."""
    return ev.extra.get("orbital_phase_cycles")


# ------------------------------------------------------------- conversions

def low_eccentricity_section(keplerian: dict) -> dict:
    """A ``[binary]`` section (dict) of a keplerian/relativistic orbit written
    in the low-eccentricity form: e sin w, e cos w, t_asc = t_peri - w Pb / 2 pi,
    and the rates d(e sin w)/dt = e' sin w + e w' cos w, d(e cos w)/dt =
    e' cos w - e w' sin w (exact at the epoch)."""
    e = float(keplerian["eccentricity"])
    w = math.radians(float(keplerian["periastron_longitude_deg"]))
    e_rate = float(keplerian.get("eccentricity_derivative_per_s", 0.0))
    w_rate = float(keplerian.get("periastron_advance_deg_per_yr", 0.0)) * DEG_PER_YR_TO_RAD_PER_S
    period_days = Decimal(str(keplerian["orbital_period_days"]))
    periastron_epoch = Decimal(str(keplerian["periastron_epoch_mjd"]))
    ascending_node_epoch = periastron_epoch - period_days * Decimal(repr(w / (2 * math.pi)))
    out = {"model": "low_eccentricity"}
    for key in _COMMON:
        if key in keplerian:
            out[key] = keplerian[key]
    out.update({"e_sin_omega": e * math.sin(w), "e_cos_omega": e * math.cos(w),
                "ascending_node_epoch_mjd": str(ascending_node_epoch)})
    if e_rate or w_rate:
        out["e_sin_omega_derivative_per_s"] = e_rate * math.sin(w) + e * w_rate * math.cos(w)
        out["e_cos_omega_derivative_per_s"] = e_rate * math.cos(w) - e * w_rate * math.sin(w)
    for key in (*_SHAPIRO_RANGE, *_SHAPIRO_MASS):
        if key in keplerian:
            out[key] = keplerian[key]
    return out


def keplerian_section(low_e: dict, model: str = "keplerian") -> dict:
    """The inverse of :func:`low_eccentricity_section`: e = hypot(h, k),
    w = atan2(h, k), t_peri = t_asc + w Pb / 2 pi, e' = h' sin w + k' cos w,
    w' = (h' cos w - k' sin w) / e."""
    eta, kappa = float(low_e.get("e_sin_omega", 0.0)), float(low_e.get("e_cos_omega", 0.0))
    e = math.hypot(eta, kappa)
    w = math.atan2(eta, kappa) % (2 * math.pi)
    eta_rate = float(low_e.get("e_sin_omega_derivative_per_s", 0.0))
    kappa_rate = float(low_e.get("e_cos_omega_derivative_per_s", 0.0))
    period_days = Decimal(str(low_e["orbital_period_days"]))
    ascending_node_epoch = Decimal(str(low_e["ascending_node_epoch_mjd"]))
    out = {"model": model}
    for key in _COMMON:
        if key in low_e:
            out[key] = low_e[key]
    periastron_epoch = ascending_node_epoch + period_days * Decimal(repr(w / (2 * math.pi)))
    out.update({"eccentricity": e, "periastron_longitude_deg": math.degrees(w),
                "periastron_epoch_mjd": str(periastron_epoch)})
    if (eta_rate or kappa_rate) and e > 0:
        out["eccentricity_derivative_per_s"] = eta_rate * math.sin(w) + kappa_rate * math.cos(w)
        out["periastron_advance_deg_per_yr"] = ((eta_rate * math.cos(w) - kappa_rate * math.sin(w))
                                                / e / DEG_PER_YR_TO_RAD_PER_S)
    if model != "keplerian":
        for key in (*_SHAPIRO_RANGE, *_SHAPIRO_MASS):
            if key in low_e:
                out[key] = low_e[key]
    return out


def build_binary(value, path, model) -> list[ModelSection]:
    """OPTIONAL_SECTIONS builder for ``[binary]``."""
    if isinstance(value, list):
        raise InputError("only one [binary] section is supported (use [binary], not "
                         "[[binary]])", path=path, field=SECTION)
    return [Binary(value, path)]


def _finite(x):
    return None if x is None or not np.isfinite(x) else float(x)


__all__ = ["Binary", "build_binary", "orbital_phase_cycles", "low_eccentricity_section",
           "keplerian_section", "MODELS", "model_keys", "SOLAR_MASS_TIME_S"]
