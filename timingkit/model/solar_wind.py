"""The solar wind: dispersion by the interplanetary electrons (``[solar_wind]``).

Model: a spherically symmetric electron density n(r) = n0 (1 au / r)^2 about
the Sun, n0 = ``electron_density_at_1au_cm3`` (cm^-3, fittable). The section
is applied only when the model file has it (README: Accuracy says why); its
delay is added to the dispersion delay at the barycentric frequency, with the
model's dispersion constant.

Line-of-sight integral (from the observer to infinity). Let rho be the
vector from the Sun to the observer (r = |rho|), n the unit vector towards
the pulsar and theta the angle between them (rho.n = r cos theta; theta = 0
with the Sun straight behind the observer, theta = pi - elongation). A
point of the line of sight is x(s) = rho + s n, s >= 0, with

    |x(s)|^2 = r^2 + 2 s r cos theta + s^2 = (s + r cos theta)^2 + b^2,
    b = r sin theta (the impact parameter),

so the column density is

    DM_sw = n0 au^2 integral_0^inf ds / ((s + r cos theta)^2 + b^2)
          = n0 au^2 / b [arctan((s + r cos theta) / b)]_0^inf
          = n0 au^2 / b (pi/2 - arctan(cot theta))
          = n0 au^2 theta / (r sin theta).

At opposition (theta -> 0) it tends to n0 au^2 / r; at 90 degrees from the
Sun it is n0 au (pi/2) = 3.0e-5 pc cm^-3 for n0 = 4 cm^-3 (60 ns at 1400 MHz);
1 degree from the Sun it is 180 n0 au (7 µs at 1400 MHz for n0 = 4). The
delay is linear in n0, so its partial derivative is the delay for n0 = 1.
"""

from __future__ import annotations

from decimal import Decimal

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.model_file import Key, take_section
from timingkit.geometry import delays
from timingkit.model.base import ModelSection, Evaluation
from timingkit.model.parameters import Parameter

SECTION = "solar_wind"
DENSITY_KEY = "electron_density_at_1au_cm3"
SOLAR_WIND_KEYS = {DENSITY_KEY: Key("number", required=True, unit="cm^-3")}
AU_IN_PC = delays.AU_M / delays.PARSEC_M
# The density used to estimate the size of an unmodelled solar wind (common
# practice: values of a few cm^-3 at 1 au are usual in timing work).
ESTIMATE_DENSITY_CM3 = 4.0


def solar_wind_dm_per_density(sun_to_observer_m: np.ndarray, direction: np.ndarray) -> np.ndarray:
    """DM (pc cm^-3) of the solar wind per unit n0 (cm^-3): au^2 theta / (r sin theta)
    in pc (module docstring); theta from atan2, so it stays exact near 0 and pi."""
    direction = np.broadcast_to(direction, sun_to_observer_m.shape)
    along = np.einsum("ij,ij->i", sun_to_observer_m, direction)
    r = np.sqrt(np.einsum("ij,ij->i", sun_to_observer_m, sun_to_observer_m))
    impact = np.linalg.norm(np.cross(sun_to_observer_m, direction), axis=1)
    theta = np.arctan2(impact, along)
    # theta / sin(theta), with its series 1 + theta^2/6 where sin(theta) underflows
    ratio = np.where(theta > 1e-4, theta / np.maximum(np.sin(theta), 1e-300),
                     1.0 + theta ** 2 / 6.0)
    return AU_IN_PC * (delays.AU_M / r) * ratio


def solar_wind_delay_per_density_s(ev: Evaluation, constant_s_mhz2: float) -> np.ndarray:
    """Dispersion delay (s) of the solar wind per cm^-3 at 1 au, 0 at the barycentre."""
    obs = ev.obs
    dm = solar_wind_dm_per_density(obs.sun_to_observer_m, ev.direction)
    return np.where(obs.barycentric_input, 0.0,
                    delays.dispersion_delay_s(dm, ev.freq_bary_mhz, constant_s_mhz2))


class SolarWind(ModelSection):
    section = SECTION
    contribution = "propagation"

    def __init__(self, section: dict, path: str | None, constant_s_mhz2: float):
        s = take_section(section, SECTION, SOLAR_WIND_KEYS, path)
        value = s[DENSITY_KEY]
        if not (np.isfinite(value) and 0.0 <= value <= 1e4):
            raise InputError(f"electron density at 1 au must lie within 0-10000 cm^-3 (a few "
                             f"cm^-3 is usual), got {value!r}", path=path,
                             field=f"{SECTION}.{DENSITY_KEY}")
        self.constant_s_mhz2 = constant_s_mhz2
        self.density = Parameter(f"{SECTION}.{DENSITY_KEY}", value, "cm^-3",
                                 uncertainty=s.get("uncertainty", {}).get(DENSITY_KEY),
                                 description="solar-wind electron density at 1 au")

    def parameters(self):
        return [self.density]

    def apply(self, ev: Evaluation) -> None:
        unit = solar_wind_delay_per_density_s(ev, self.constant_s_mhz2)
        ev.extra["solar_wind_delay_per_density_s"] = unit
        ev.dispersion_s = ev.dispersion_s + self.density.value * unit

    def partials(self, ev: Evaluation, names: list[str]) -> dict[str, np.ndarray]:
        if self.density.name not in names:
            return {}
        return {self.density.name: -ev.extra["solar_wind_delay_per_density_s"]}

    def to_section(self) -> dict:
        return {DENSITY_KEY: self.density.value}


def build_solar_wind(value, path: str | None, model) -> list[ModelSection]:
    return [SolarWind(value, path, model.dispersion_constant_s_mhz2)]


def set_solar_wind(model, density_cm3: float, field: str | None = None) -> None:
    """Give ``model`` (a TimingModel) a [solar_wind] section of this density,
    replacing any it has (for simulations)."""
    try:
        section = SolarWind({DENSITY_KEY: Decimal(repr(float(density_cm3)))}, model.path,
                            model.dispersion_constant_s_mhz2)
    except InputError as exc:
        raise InputError(exc.message, field=field, quoted=exc.quoted) from None
    model.extra = [c for c in model.extra if c.section != SECTION] + [section]
    model._by_name = {p.name: p for p in model.parameters()}


def unmodelled_solar_wind_warning(ev: Evaluation, threshold_s: float) -> str | None:
    """A warning when a model without [solar_wind] would change by more than
    ``threshold_s`` peak to peak over these TOAs with ESTIMATE_DENSITY_CM3."""
    delay = ESTIMATE_DENSITY_CM3 * solar_wind_delay_per_density_s(ev, delays.DISPERSION_CONSTANT_S_MHZ2)
    earth = ~ev.obs.barycentric_input & np.isfinite(ev.obs.toas.freq_mhz)
    if not earth.any():
        return None
    spread = float(np.ptp(delay[earth]))
    if spread <= threshold_s:
        return None
    return (f"the solar wind is not modelled: at these TOAs it would vary by {spread * 1e9:.0f} ns "
            f"(up to {delay[earth].max() * 1e9:.0f} ns) for an electron density of "
            f"{ESTIMATE_DENSITY_CM3:g} cm^-3 at 1 au; add a [{SECTION}] section with "
            f"{DENSITY_KEY} (and free it to measure it)")
