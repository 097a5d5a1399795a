"""Sky position, proper motion and parallax (ICRS), and the delays they
govern: Roemer (with the parallax term), solar and planetary Shapiro, and
the barycentric observing frequency for dispersion."""

from __future__ import annotations

from decimal import Decimal

import numpy as np
from astropy.coordinates import Angle

from timingkit import delays
from timingkit.errors import InputError
from timingkit.model.base import Component, Evaluation
from timingkit.model.parameters import Parameter, mjd_decimal, mjd_parts
from timingkit.modelfile import Key, take_section
from timingkit.timearray import SECONDS_PER_DAY

POSITION_KEYS = {
    "ra": Key("text", required=True),
    "dec": Key("text", required=True),
    "epoch_mjd": Key("mjd"),
    "pm_ra_cosdec_mas_per_yr": Key("number", default=0.0),
    "pm_dec_mas_per_yr": Key("number", default=0.0),
    "parallax_mas": Key("number", default=0.0),
}

RAD_TO_MAS = 180.0 / np.pi * 3600e3


def parse_angle(text: str, unit: str, field: str, path: str | None) -> float:
    """Right ascension (hours) or declination (degrees) in radians, from
    sexagesimal ('05h12m33.4s', '05:12:33.4') or decimal degrees ('78.14d')."""
    try:
        ang = Angle(text, unit=unit)
    except Exception:
        raise InputError(f"cannot read angle {text!r} (e.g. '05h12m33.4567s' or '05:12:33.4567'"
                         f" for ra, '+21d02m11.234s' for dec)", path=path, field=field) from None
    return float(ang.radian)


def format_ra(ra_rad: float) -> str:
    return Angle(ra_rad, unit="rad").to_string(unit="hourangle", sep="hms", precision=9, pad=True)


def format_dec(dec_rad: float) -> str:
    return Angle(dec_rad, unit="rad").to_string(unit="deg", sep="dms", precision=8,
                                                alwayssign=True, pad=True)


class Astrometry(Component):
    section = "position"
    kind = "geometry"

    def __init__(self, section: dict | None, path: str | None, default_epoch: Decimal | None,
                 planet_shapiro: bool = False):
        if section is None:
            raise InputError("missing required section [position] (ra, dec)", path=path,
                             field="position")
        s = take_section(section, "position", POSITION_KEYS, path)
        unc = s.get("uncertainty", {})
        ra = parse_angle(s["ra"], "hourangle", "position.ra", path)
        dec = parse_angle(s["dec"], "deg", "position.dec", path)
        if not -np.pi / 2 <= dec <= np.pi / 2:
            raise InputError("declination must lie within -90..+90 degrees", path=path,
                             field="position.dec")
        epoch = s["epoch_mjd"] if s["epoch_mjd"] is not None else default_epoch
        if epoch is None:
            raise InputError("give position.epoch_mjd (or spin.epoch_mjd)", path=path,
                             field="position.epoch_mjd")
        self.epoch_day, self.epoch_frac = mjd_parts(epoch)
        if s["parallax_mas"] < 0:
            raise InputError("parallax must be >= 0", path=path, field="position.parallax_mas")
        self.planet_shapiro = planet_shapiro
        # uncertainties of ra and dec are written in mas of arc (ra: of the angle
        # itself, not multiplied by cos(dec))
        self.ra = Parameter("position.ra", ra, "rad", description="right ascension (ICRS)",
                            uncertainty=_mas_unc(unc.get("ra")), file_scale=RAD_TO_MAS)
        self.dec = Parameter("position.dec", dec, "rad", description="declination (ICRS)",
                             uncertainty=_mas_unc(unc.get("dec")), file_scale=RAD_TO_MAS)
        self.pm_ra = Parameter("position.pm_ra_cosdec_mas_per_yr", s["pm_ra_cosdec_mas_per_yr"],
                               "mas/yr", uncertainty=unc.get("pm_ra_cosdec_mas_per_yr"))
        self.pm_dec = Parameter("position.pm_dec_mas_per_yr", s["pm_dec_mas_per_yr"], "mas/yr",
                                uncertainty=unc.get("pm_dec_mas_per_yr"))
        self.parallax = Parameter("position.parallax_mas", s["parallax_mas"], "mas",
                                  uncertainty=unc.get("parallax_mas"))

    def parameters(self):
        return [self.ra, self.dec, self.pm_ra, self.pm_dec, self.parallax]

    def _years(self, ev: Evaluation) -> np.ndarray:
        hi, lo = ev.obs.tdb.seconds_since(self.epoch_day, self.epoch_frac)
        return (hi + lo) / delays.JULIAN_YEAR_S

    def apply(self, ev: Evaluation) -> None:
        obs = ev.obs
        years = self._years(ev)
        n, east, north = delays.direction_with_proper_motion(
            self.ra.value, self.dec.value, self.pm_ra.value, self.pm_dec.value, years)
        distance = None
        if self.parallax.value > 0:
            distance = delays.AU_M / (self.parallax.value * delays.MAS_TO_RAD)
        roemer = delays.roemer_delay_s(obs.observer_ssb_m, n, distance)
        shapiro = delays.shapiro_delay_s(obs.sun_to_observer_m, n)
        for body, vec in obs.planet_to_observer_m.items():
            shapiro = shapiro + delays.shapiro_delay_s(vec, n, delays.GM_OVER_C3_S[body])
        bary = obs.barycentric_input
        roemer = np.where(bary, 0.0, roemer)
        shapiro = np.where(bary, 0.0, shapiro)
        ev.direction = n
        ev.roemer_s = roemer
        ev.shapiro_s = shapiro
        ev.freq_bary_mhz = np.where(
            bary, obs.toas.freq_mhz,
            delays.barycentric_frequency_mhz(obs.toas.freq_mhz, obs.observer_ssb_vel_m_per_s, n))
        ev.extra["astrometry"] = (years, east, north)

    def partials(self, ev: Evaluation, names: list[str]) -> dict[str, np.ndarray]:
        """d(t_emit)/d(param) in seconds per parameter unit; the Roemer delay
        enters the emission time with a + sign."""
        years, east, north = ev.extra["astrometry"]
        r = ev.obs.observer_ssb_m
        c = delays.SPEED_OF_LIGHT_M_PER_S
        out = {}
        dec = self.dec.value
        # dn/dra = cos(dec) * east, dn/ddec = north (at the position epoch);
        # proper motion moves n along east/north by mu * t.
        r_east = r @ east
        r_north = r @ north
        if "position.ra" in names:
            out["position.ra"] = (r_east * np.cos(dec)) / c
        if "position.dec" in names:
            out["position.dec"] = r_north / c
        if "position.pm_ra_cosdec_mas_per_yr" in names:
            out["position.pm_ra_cosdec_mas_per_yr"] = (r_east * years * delays.MAS_TO_RAD) / c
        if "position.pm_dec_mas_per_yr" in names:
            out["position.pm_dec_mas_per_yr"] = (r_north * years * delays.MAS_TO_RAD) / c
        if "position.parallax_mas" in names:
            r_dot_n = np.einsum("ij,ij->i", r, ev.direction)
            perp2 = np.einsum("ij,ij->i", r, r) - r_dot_n ** 2
            out["position.parallax_mas"] = -perp2 * delays.MAS_TO_RAD / (2 * c * delays.AU_M)
        bary = ev.obs.barycentric_input
        return {k: np.where(bary, 0.0, v) for k, v in out.items()}

    def to_section(self) -> dict:
        sec = {
            "ra": format_ra(self.ra.value),
            "dec": format_dec(self.dec.value),
            "epoch_mjd": mjd_decimal(self.epoch_day, self.epoch_frac),
            "pm_ra_cosdec_mas_per_yr": self.pm_ra.value,
            "pm_dec_mas_per_yr": self.pm_dec.value,
            "parallax_mas": self.parallax.value,
        }
        return sec


def _mas_unc(value):
    return None if value is None else value / RAD_TO_MAS


__all__ = ["Astrometry", "format_ra", "format_dec", "parse_angle", "SECONDS_PER_DAY"]
