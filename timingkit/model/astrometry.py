"""Sky position, proper motion and parallax, and the delays they govern:
Roemer (with the parallax term), solar and planetary Shapiro, and the
barycentric observing frequency for dispersion.

Two forms of the same parameters (``[position] frame = ...``):

- ``"equatorial"`` (default): ICRS right ascension / declination (``ra``,
  ``dec`` as sexagesimal text), ``pm_ra_cosdec_mas_per_yr``,
  ``pm_dec_mas_per_yr``.
- ``"ecliptic"``: ``ecliptic_longitude_deg``, ``ecliptic_latitude_deg``,
  ``pm_longitude_coslat_mas_per_yr``, ``pm_latitude_mas_per_yr``.

Ecliptic frame (our choice): the ICRS axes rotated about the ICRS x axis by
the IAU 2006 obliquity of the ecliptic at J2000.0, eps0 = 84381.406 arcsec
(IERS Conventions 2010, eq. 5.40). It is a fixed rotation, so the two forms
describe exactly the same motion on the sky and convert both ways without
loss. (It ignores the 23 mas frame bias between the ICRS and the dynamical
J2000 equinox, i.e. it is *not* astropy's BarycentricMeanEcliptic, which
includes the bias; for timing only the self-consistency matters.)

Common keys: ``epoch_mjd`` (position epoch), ``parallax_mas``, and
``distance_kpc`` (optional, only for derived physics such as the Shklovskii
term; it does not enter the delays; the parallax does).
"""

from __future__ import annotations

import math
import re
from fractions import Fraction
from decimal import Decimal

import numpy as np

from timingkit.geometry import delays
from timingkit.formats.errors import InputError, excerpt
from timingkit.model.correlations import with_fitted_covariance
from timingkit.model.base import ModelSection, Evaluation
from timingkit.model.parameters import Parameter, mjd_decimal, mjd_parts
from timingkit.formats.model_file import Key, take_section
from timingkit.numerics.timearray import SECONDS_PER_DAY

FRAMES = ("equatorial", "ecliptic")
# 10 arcsec/yr: faster than any star seen from the Sun (pulsars: < 1 arcsec/yr)
PROPER_MOTION_RANGE = {"unit": "mas/yr", "low": -1e4, "high": 1e4}
COMMON_KEYS = {
    "frame": Key("text", default="equatorial"),
    "epoch_mjd": Key("mjd"),
    "parallax_mas": Key("number", default=0.0, unit="mas", low=-1000.0, high=1000.0),
    "distance_kpc": Key("number", unit="kpc", above=0.0, high=1000.0),
}
EQUATORIAL_KEYS = {
    "ra": Key("text", required=True),
    "dec": Key("text", required=True),
    "pm_ra_cosdec_mas_per_yr": Key("number", default=0.0, **PROPER_MOTION_RANGE),
    "pm_dec_mas_per_yr": Key("number", default=0.0, **PROPER_MOTION_RANGE),
    **COMMON_KEYS,
}
ECLIPTIC_KEYS = {
    "ecliptic_longitude_deg": Key("number", required=True, unit="deg", low=-360.0, high=360.0),
    "ecliptic_latitude_deg": Key("number", required=True, unit="deg", low=-90.0, high=90.0),
    "pm_longitude_coslat_mas_per_yr": Key("number", default=0.0, **PROPER_MOTION_RANGE),
    "pm_latitude_mas_per_yr": Key("number", default=0.0, **PROPER_MOTION_RANGE),
    **COMMON_KEYS,
}
POSITION_KEYS = EQUATORIAL_KEYS     # kept for callers of the old name

RAD_TO_MAS = 180.0 / np.pi * 3600e3
DEG_TO_MAS = 3600e3
ARCSEC_TO_RAD = np.pi / (180.0 * 3600.0)

# IAU 2006 obliquity of the ecliptic at J2000.0 (IERS Conventions 2010, eq. 5.40).
ECLIPTIC_OBLIQUITY_ARCSEC = 84381.406
ECLIPTIC_OBLIQUITY_RAD = ECLIPTIC_OBLIQUITY_ARCSEC * ARCSEC_TO_RAD
ECLIPTIC_FRAME_NOTE = ("ecliptic = ICRS rotated about its x axis by the IAU 2006 obliquity at "
                       "J2000.0, 84381.406 arcsec (IERS Conventions 2010, eq. 5.40)")
_C, _S = math.cos(ECLIPTIC_OBLIQUITY_RAD), math.sin(ECLIPTIC_OBLIQUITY_RAD)
# vectors: v_ecliptic = ICRS_TO_ECLIPTIC @ v_icrs
ICRS_TO_ECLIPTIC = np.array([[1.0, 0.0, 0.0], [0.0, _C, _S], [0.0, -_S, _C]])
FRAME_TO_ICRS = {"equatorial": np.eye(3), "ecliptic": ICRS_TO_ECLIPTIC.T.copy()}


_SEXAGESIMAL = re.compile(r"^\s*([+-]?)(\d+)([hd:])(\d+)([m:])(\d+(?:\.\d*)?)(s?)\s*$")


def _parse_sexagesimal(text: str, unit: str):
    """Exact reading of 'HHhMMmSS.sss s', 'DDdMMmSS.sss s' or colon forms:
    the fields are combined as exact rationals and rounded once. Returns None
    for other forms (left to astropy). Written here because astropy's Angle
    goes through floats, and importing astropy.coordinates costs ~0.4 s."""
    m = _SEXAGESIMAL.match(text)
    if not m:
        return None
    sign, whole, sep1, minutes, sep2, seconds, _ = m.groups()
    if sep1 != ":" and (sep1 == "h") != (unit == "hourangle"):
        return None
    if (sep1 == ":") != (sep2 == ":"):
        return None
    if int(minutes) >= 60 or Fraction(seconds) >= 60:
        raise ValueError("minutes and seconds must be below 60")
    value = Fraction(int(whole)) + Fraction(int(minutes), 60) + Fraction(seconds) / 3600
    if sign == "-":
        value = -value
    turns = value / (24 if unit == "hourangle" else 360)
    return float(turns * 2) * math.pi


def parse_angle(text: str, unit: str, field: str, path: str | None) -> float:
    """Right ascension (hours) or declination (degrees) in radians, from
    sexagesimal ('07h41m27.4s', '07:41:27.4') or decimal degrees ('78.14d')."""
    try:
        value = _parse_sexagesimal(text, unit)
        if value is None:
            from astropy.coordinates import Angle
            value = float(Angle(text, unit=unit).radian)
    except Exception:
        raise InputError(f"cannot read angle {excerpt(text)} (e.g. '07h41m27.392s' or "
                         "'07:41:27.392' for ra, '-03d26m51.48s' for dec)", path=path,
                         field=field, quoted=(text,)) from None
    if unit == "hourangle" and not 0.0 <= value < 2 * math.pi:
        raise InputError(f"right ascension must lie in 0h to 24h, found {excerpt(text)}",
                         path=path, field=field, quoted=(text,))
    if unit != "hourangle" and not -math.pi / 2 <= value <= math.pi / 2:
        raise InputError(f"declination must lie in -90d to +90d, found {excerpt(text)}",
                         path=path, field=field, quoted=(text,))
    return value


def format_ra(ra_rad: float) -> str:
    from astropy.coordinates import Angle
    return Angle(ra_rad, unit="rad").to_string(unit="hourangle", sep="hms", precision=9, pad=True)


def format_dec(dec_rad: float) -> str:
    from astropy.coordinates import Angle
    return Angle(dec_rad, unit="rad").to_string(unit="deg", sep="dms", precision=8,
                                                alwayssign=True, pad=True)


def format_longitude_dms(lon_deg: float) -> str:
    from astropy.coordinates import Angle
    return Angle(lon_deg % 360.0, unit="deg").to_string(unit="deg", sep="dms", precision=8,
                                                        pad=True)


# ------------------------------------------------------------ frame conversion

def sky_basis(lon_rad: float, lat_rad: float):
    """Unit vector n and the local east / north unit vectors at (lon, lat)."""
    n = delays.unit_vector(lon_rad, lat_rad)
    east = np.array([-math.sin(lon_rad), math.cos(lon_rad), 0.0])
    north = np.array([-math.sin(lat_rad) * math.cos(lon_rad),
                      -math.sin(lat_rad) * math.sin(lon_rad), math.cos(lat_rad)])
    return n, east, north


def rotate_position(lon_rad, lat_rad, pm_lon_coslat, pm_lat, matrix, covariance=None):
    """Position and proper motion in the frame ``matrix @ v`` of a source at
    (lon, lat) (rad) with proper motion (mu_lon cos lat, mu_lat) (any unit).

    Returns a dict with ``lon_rad`` (in [0, 2 pi)), ``lat_rad``,
    ``pm_lon_coslat``, ``pm_lat`` and ``jacobian``: the 4x4 matrix
    d(new lon, lat, pm_lon, pm_lat)/d(old ...) (angles in rad). The on-sky
    offsets and the proper-motion vector turn by the angle between the two
    frames' north directions. With ``covariance`` (4x4 of the inputs, rad and
    pm units) it also returns the converted ``covariance`` and the
    uncertainties ``lon_err_rad, lat_err_rad, pm_lon_coslat_err, pm_lat_err``.
    Exact for the linear-on-the-sky motion used by the timing model.
    """
    n, east, north = sky_basis(lon_rad, lat_rad)
    n2 = matrix @ n
    lon2 = math.atan2(n2[1], n2[0]) % (2 * math.pi)
    lat2 = math.atan2(n2[2], math.hypot(n2[0], n2[1]))
    _, east2, north2 = sky_basis(lon2, lat2)
    e_rot, n_rot = matrix @ east, matrix @ north
    turn = np.array([[e_rot @ east2, n_rot @ east2], [e_rot @ north2, n_rot @ north2]])
    velocity = matrix @ (pm_lon_coslat * east + pm_lat * north)
    jac = np.zeros((4, 4))
    cos1, cos2 = math.cos(lat_rad), math.cos(lat2)
    jac[:2, :2] = np.diag([1.0 / cos2 if cos2 > 0 else np.inf, 1.0]) @ turn @ np.diag([cos1, 1.0])
    jac[2:, 2:] = turn
    out = {"lon_rad": lon2, "lat_rad": lat2, "pm_lon_coslat": float(velocity @ east2),
           "pm_lat": float(velocity @ north2), "jacobian": jac}
    if covariance is not None:
        cov = np.asarray(covariance, dtype=float)
        cov = np.where(np.isfinite(cov), cov, 0.0)
        new = jac @ cov @ jac.T
        out["covariance"] = new
        sig = np.sqrt(np.maximum(np.diag(new), 0.0))
        out.update(lon_err_rad=float(sig[0]), lat_err_rad=float(sig[1]),
                   pm_lon_coslat_err=float(sig[2]), pm_lat_err=float(sig[3]))
    return out


def equatorial_to_ecliptic(ra_rad, dec_rad, pm_ra_cosdec=0.0, pm_dec=0.0, covariance=None):
    """ICRS (ra, dec, proper motion) -> ecliptic (see module docstring)."""
    return rotate_position(ra_rad, dec_rad, pm_ra_cosdec, pm_dec, ICRS_TO_ECLIPTIC, covariance)


def ecliptic_to_equatorial(lon_rad, lat_rad, pm_lon_coslat=0.0, pm_lat=0.0, covariance=None):
    """Ecliptic (longitude, latitude, proper motion) -> ICRS."""
    return rotate_position(lon_rad, lat_rad, pm_lon_coslat, pm_lat, ICRS_TO_ECLIPTIC.T,
                           covariance)


# ------------------------------------------------------------------ section

class Astrometry(ModelSection):
    section = "position"
    contribution = "sky_path"

    def __init__(self, section: dict | None, path: str | None, default_epoch: Decimal | None,
                 shapiro_delay_planets: bool | list = True):
        if section is None:
            raise InputError("missing required section [position] (ra, dec)", path=path,
                             field="position")
        frame = section.get("frame", "equatorial") if isinstance(section, dict) else None
        if frame not in FRAMES:
            raise InputError(f"unknown frame {excerpt(frame)}; legal: {', '.join(FRAMES)}",
                             path=path, field="position.frame", quoted=(frame,))
        spec = EQUATORIAL_KEYS if frame == "equatorial" else ECLIPTIC_KEYS
        s = take_section(section, "position", spec, path)
        unc = s.get("uncertainty", {})
        self.frame = frame
        self.shapiro_delay_planets = shapiro_delay_planets
        epoch = s["epoch_mjd"] if s["epoch_mjd"] is not None else default_epoch
        if epoch is None:
            raise InputError("give position.epoch_mjd (or spin.epoch_mjd)", path=path,
                             field="position.epoch_mjd")
        self.epoch_day, self.epoch_frac = mjd_parts(epoch)
        if s["parallax_mas"] < 0:
            raise InputError("parallax must be >= 0", path=path, field="position.parallax_mas")
        self.distance_kpc = s["distance_kpc"]
        self.distance_uncertainty_kpc = unc.get("distance_kpc")
        if self.distance_kpc is not None and not self.distance_kpc > 0:
            raise InputError("distance must be > 0 kpc", path=path, field="position.distance_kpc")
        self.parallax = Parameter("position.parallax_mas", s["parallax_mas"], "mas",
                                  uncertainty=unc.get("parallax_mas"), description="parallax")
        if frame == "equatorial":
            ra = parse_angle(s["ra"], "hourangle", "position.ra", path)
            dec = parse_angle(s["dec"], "deg", "position.dec", path)
            lat_deg = math.degrees(dec)
            self._set_equatorial(ra, dec, s["pm_ra_cosdec_mas_per_yr"], s["pm_dec_mas_per_yr"],
                                 unc)
        else:
            lat_deg = s["ecliptic_latitude_deg"]
            self._set_ecliptic(s["ecliptic_longitude_deg"] % 360.0, lat_deg,
                               s["pm_longitude_coslat_mas_per_yr"], s["pm_latitude_mas_per_yr"],
                               unc)
        if not -90.0 <= lat_deg <= 90.0:
            name = "dec" if frame == "equatorial" else "ecliptic_latitude_deg"
            what = "declination" if frame == "equatorial" else "ecliptic latitude"
            raise InputError(f"{what} must lie within -90..+90 degrees", path=path,
                             field=f"position.{name}")

    # parameters of the current frame ---------------------------------------
    def _set_equatorial(self, ra_rad, dec_rad, pm_ra, pm_dec, unc):
        # uncertainties of ra and dec are written in mas of arc (ra: of the angle
        # itself, not multiplied by cos(dec))
        self.frame = "equatorial"
        self.longitude = Parameter("position.ra", ra_rad, "rad", description="right ascension (ICRS)",
                                   uncertainty=_scaled(unc.get("ra"), 1 / RAD_TO_MAS),
                                   file_scale=RAD_TO_MAS)
        self.latitude = Parameter("position.dec", dec_rad, "rad", description="declination (ICRS)",
                                  uncertainty=_scaled(unc.get("dec"), 1 / RAD_TO_MAS),
                                  file_scale=RAD_TO_MAS)
        self.pm_longitude = Parameter("position.pm_ra_cosdec_mas_per_yr", pm_ra, "mas/yr",
                                      uncertainty=unc.get("pm_ra_cosdec_mas_per_yr"),
                                      description="proper motion in ra times cos(dec)")
        self.pm_latitude = Parameter("position.pm_dec_mas_per_yr", pm_dec, "mas/yr",
                                     uncertainty=unc.get("pm_dec_mas_per_yr"),
                                     description="proper motion in dec")
        self.angle_unit_rad = 1.0

    def _set_ecliptic(self, lon_deg, lat_deg, pm_lon, pm_lat, unc):
        self.frame = "ecliptic"
        self.longitude = Parameter("position.ecliptic_longitude_deg", lon_deg, "deg",
                                   uncertainty=unc.get("ecliptic_longitude_deg"),
                                   description="ecliptic longitude (IERS 2010 obliquity)")
        self.latitude = Parameter("position.ecliptic_latitude_deg", lat_deg, "deg",
                                  uncertainty=unc.get("ecliptic_latitude_deg"),
                                  description="ecliptic latitude (IERS 2010 obliquity)")
        self.pm_longitude = Parameter("position.pm_longitude_coslat_mas_per_yr", pm_lon, "mas/yr",
                                      uncertainty=unc.get("pm_longitude_coslat_mas_per_yr"),
                                      description="proper motion in ecliptic longitude "
                                                  "times cos(latitude)")
        self.pm_latitude = Parameter("position.pm_latitude_mas_per_yr", pm_lat, "mas/yr",
                                     uncertainty=unc.get("pm_latitude_mas_per_yr"),
                                     description="proper motion in ecliptic latitude")
        self.angle_unit_rad = math.pi / 180.0

    # equatorial names kept for callers
    @property
    def ra(self) -> Parameter:
        return self._frame_parameter("equatorial", self.longitude)

    @property
    def dec(self) -> Parameter:
        return self._frame_parameter("equatorial", self.latitude)

    @property
    def pm_ra(self) -> Parameter:
        return self._frame_parameter("equatorial", self.pm_longitude)

    @property
    def pm_dec(self) -> Parameter:
        return self._frame_parameter("equatorial", self.pm_latitude)

    def _frame_parameter(self, frame, p):
        if self.frame != frame:
            raise AttributeError(f"the position is given in the {self.frame} frame; use "
                                 "longitude/latitude or icrs_position()")
        return p

    def parameters(self):
        return [self.longitude, self.latitude, self.pm_longitude, self.pm_latitude, self.parallax]

    def frame_angles_rad(self) -> tuple[float, float]:
        return (self.longitude.value * self.angle_unit_rad,
                self.latitude.value * self.angle_unit_rad)

    def _angle_parameters(self):
        return [self.longitude, self.latitude, self.pm_longitude, self.pm_latitude]

    def frame_covariance(self, result=None) -> np.ndarray | None:
        """4x4 covariance of (longitude, latitude, pm_longitude, pm_latitude) in
        rad, rad, mas/yr, mas/yr: from a FitResult's covariance where those
        were fitted (correlations kept), else the parameters' uncertainties
        (diagonal); None when none of them has an uncertainty."""
        params = self._angle_parameters()
        scale = np.array([self.angle_unit_rad, self.angle_unit_rad, 1.0, 1.0])
        sig = [p.uncertainty for p in params]
        if all(s is None for s in sig) and result is None:
            return None
        cov = with_fitted_covariance(np.diag([0.0 if s is None else float(s) ** 2 for s in sig]),
                                     [p.name for p in params], result)
        if not np.any(cov):
            return None
        return cov * np.outer(scale, scale)

    def icrs_position(self, result=None) -> dict:
        """ICRS ra, dec (``lon_rad``, ``lat_rad``), proper motion (mas/yr) and,
        when known, their uncertainties (``lon_err_rad`` ...), whatever the
        frame of the model (see :func:`rotate_position`)."""
        lon, lat = self.frame_angles_rad()
        cov = self.frame_covariance(result)
        matrix = np.eye(3) if self.frame == "equatorial" else ICRS_TO_ECLIPTIC.T
        return rotate_position(lon, lat, self.pm_longitude.value, self.pm_latitude.value, matrix,
                               cov)

    def convert(self, frame: str) -> None:
        """Re-express the position in ``frame`` ('equatorial' or 'ecliptic'),
        in place; free flags carry over, uncertainties are converted to first
        order from the parameters' own uncertainties (as uncorrelated: the
        model file keeps no correlations)."""
        if frame not in FRAMES:
            raise InputError(f"unknown frame {excerpt(frame)}; legal: {', '.join(FRAMES)}",
                             field="position.frame", quoted=(frame,))
        if frame == self.frame:
            return
        params = self._angle_parameters()
        free = [p.free for p in params]
        have = [p.uncertainty is not None for p in params]
        lon, lat = self.frame_angles_rad()
        matrix = ICRS_TO_ECLIPTIC if frame == "ecliptic" else ICRS_TO_ECLIPTIC.T
        r = rotate_position(lon, lat, self.pm_longitude.value, self.pm_latitude.value, matrix,
                            self.frame_covariance())
        ang = any(have[:2])
        pm = any(have[2:])
        if frame == "ecliptic":
            unc = {"ecliptic_longitude_deg": _scaled(r.get("lon_err_rad"), 180 / math.pi),
                   "ecliptic_latitude_deg": _scaled(r.get("lat_err_rad"), 180 / math.pi),
                   "pm_longitude_coslat_mas_per_yr": r.get("pm_lon_coslat_err"),
                   "pm_latitude_mas_per_yr": r.get("pm_lat_err")}
            self._set_ecliptic(math.degrees(r["lon_rad"]), math.degrees(r["lat_rad"]),
                               r["pm_lon_coslat"], r["pm_lat"], _present(unc, ang, pm))
        else:
            unc = {"ra": _scaled(r.get("lon_err_rad"), RAD_TO_MAS),
                   "dec": _scaled(r.get("lat_err_rad"), RAD_TO_MAS),
                   "pm_ra_cosdec_mas_per_yr": r.get("pm_lon_coslat_err"),
                   "pm_dec_mas_per_yr": r.get("pm_lat_err")}
            self._set_equatorial(r["lon_rad"], r["lat_rad"], r["pm_lon_coslat"], r["pm_lat"],
                                 _present(unc, ang, pm))
        for p, f in zip(self._angle_parameters(), free):
            p.free = f

    # evaluation -------------------------------------------------------------
    def _years(self, ev: Evaluation) -> np.ndarray:
        hi, lo = ev.obs.tdb.seconds_since(self.epoch_day, self.epoch_frac)
        return (hi + lo) / delays.JULIAN_YEAR_S

    def directions(self, years: np.ndarray):
        """ICRS unit vectors to the pulsar (N, 3) ``years`` after the position
        epoch, and the epoch's east and north vectors."""
        lon, lat = self.frame_angles_rad()
        n, east, north = delays.direction_with_proper_motion(
            lon, lat, self.pm_longitude.value, self.pm_latitude.value, years)
        to_icrs = FRAME_TO_ICRS[self.frame]
        if self.frame != "equatorial":
            n, east, north = n @ to_icrs.T, to_icrs @ east, to_icrs @ north
        return n, east, north

    def line_of_sight(self, obs) -> np.ndarray:
        """ICRS unit vectors to the pulsar at each TOA of ``obs`` (N, 3)."""
        hi, lo = obs.tdb.seconds_since(self.epoch_day, self.epoch_frac)
        return self.directions((hi + lo) / delays.JULIAN_YEAR_S)[0]

    def apply(self, ev: Evaluation) -> None:
        obs = ev.obs
        years = self._years(ev)
        n, east, north = self.directions(years)
        distance = None
        if self.parallax.value > 0:
            distance = delays.AU_M / (self.parallax.value * delays.MAS_TO_RAD)
        roemer = delays.roemer_delay_s(obs.observer_ssb_m, n, distance)
        shapiro = delays.shapiro_delay_s(obs.sun_to_observer_m, n) + self._planetary_shapiro(obs, n)
        bary = obs.barycentric_input
        roemer = np.where(bary, 0.0, roemer)
        shapiro = np.where(bary, 0.0, shapiro)
        ev.direction = n
        ev.roemer_s = roemer
        ev.shapiro_s = shapiro
        ev.freq_bary_mhz = np.where(
            bary, obs.toas.freq_mhz,
            delays.barycentric_frequency_mhz(obs.toas.freq_mhz, obs.observer_ssb_vel_m_per_s, n,
                                             obs.tdb_minus_proper_time_rate))
        ev.extra["astrometry"] = (years, east, north)

    def shapiro_planets(self, obs) -> list[str]:
        """The planets whose Shapiro delay this model applies to ``obs``
        (``settings.shapiro_delay_planets``: true = all that ``obs`` carries)."""
        setting = self.shapiro_delay_planets
        if setting is True:
            return list(obs.planet_to_observer_m)
        if not setting:
            return []
        missing = [p for p in setting if p not in obs.planet_to_observer_m]
        if missing:
            raise ValueError(f"observations prepared without {', '.join(missing)}: prepare them "
                             "with the model's settings.shapiro_delay_planets")
        return list(setting)

    def _planetary_shapiro(self, obs, n: np.ndarray) -> np.ndarray:
        """Sum of the planets' Shapiro delays, kept per data set while the
        position parameters do not change (a fit with the position fixed pays
        for it once)."""
        bodies = self.shapiro_planets(obs)
        key = (self.frame, self.longitude.value, self.latitude.value, self.pm_longitude.value,
               self.pm_latitude.value, self.epoch_day, self.epoch_frac, tuple(bodies))
        memo = obs.memo.get("planetary_shapiro")
        if memo is not None and memo[0] == key:
            return memo[1]
        total = np.zeros(len(obs))
        if bodies:
            for body, pos in obs.planet_track.iter_positions(bodies):
                total += delays.shapiro_delay_s(obs.observer_ssb_m - pos, n,
                                                delays.GM_OVER_C3_S[body])
        obs.memo["planetary_shapiro"] = (key, total)
        return total

    def partials(self, ev: Evaluation, names: list[str]) -> dict[str, np.ndarray]:
        """d(t_emit)/d(param) in seconds per parameter unit (rad for ra/dec,
        degrees for ecliptic angles, mas/yr, mas); the Roemer delay enters the
        emission time with a + sign. East/north are those of the position
        epoch (the proper-motion drift of the basis is a second-order effect)."""
        years, east, north = ev.extra["astrometry"]
        r = ev.obs.observer_ssb_m
        c = delays.SPEED_OF_LIGHT_M_PER_S
        out = {}
        _, lat = self.frame_angles_rad()
        # dn/dlon = cos(lat) * east, dn/dlat = north (at the position epoch);
        # proper motion moves n along east/north by mu * t.
        r_east = r @ east
        r_north = r @ north
        if self.longitude.name in names:
            out[self.longitude.name] = r_east * math.cos(lat) * self.angle_unit_rad / c
        if self.latitude.name in names:
            out[self.latitude.name] = r_north * self.angle_unit_rad / c
        if self.pm_longitude.name in names:
            out[self.pm_longitude.name] = (r_east * years * delays.MAS_TO_RAD) / c
        if self.pm_latitude.name in names:
            out[self.pm_latitude.name] = (r_north * years * delays.MAS_TO_RAD) / c
        if self.parallax.name in names:
            r_dot_n = np.einsum("ij,ij->i", r, ev.direction)
            perp2 = np.einsum("ij,ij->i", r, r) - r_dot_n ** 2
            out[self.parallax.name] = -perp2 * delays.MAS_TO_RAD / (2 * c * delays.AU_M)
        bary = ev.obs.barycentric_input
        return {k: np.where(bary, 0.0, v) for k, v in out.items()}

    def to_section(self) -> dict:
        if self.frame == "equatorial":
            sec = {"ra": format_ra(self.longitude.value), "dec": format_dec(self.latitude.value)}
        else:
            sec = {"frame": "ecliptic",
                   "ecliptic_longitude_deg": self.longitude.value,
                   "ecliptic_latitude_deg": self.latitude.value}
        sec["epoch_mjd"] = mjd_decimal(self.epoch_day, self.epoch_frac)
        sec[self.pm_longitude.key] = self.pm_longitude.value
        sec[self.pm_latitude.key] = self.pm_latitude.value
        sec["parallax_mas"] = self.parallax.value
        if self.distance_kpc is not None:
            sec["distance_kpc"] = self.distance_kpc
            if self.distance_uncertainty_kpc is not None:
                sec["uncertainty"] = {"distance_kpc": self.distance_uncertainty_kpc}
        return sec


# ------------------------------------------------------------------ reporting

ANGLE_PARAMETERS = ("position.ra", "position.dec", "position.ecliptic_longitude_deg",
                    "position.ecliptic_latitude_deg")


def _angle_text(name: str, value: float) -> str:
    if name == "position.ra":
        return format_ra(value)
    if name == "position.dec":
        return format_dec(value)
    if name == "position.ecliptic_longitude_deg":
        return format_longitude_dms(value)
    return format_dec(math.radians(value))


def angle_entry(p: Parameter, prefit: Parameter | None = None) -> dict | None:
    """Report entry of a sky-angle parameter (either frame): sexagesimal
    ``value``, ``degrees``, ``uncertainty`` in mas of the angle itself (the
    on-sky size, times cos(latitude), is in :func:`position_summary`); None
    for other parameters."""
    if p.name not in ANGLE_PARAMETERS:
        return None
    to_deg = 180.0 / math.pi if p.unit == "rad" else 1.0
    unc_mas = None if p.uncertainty is None else float(p.uncertainty) * to_deg * DEG_TO_MAS
    unit = "hms" if p.name == "position.ra" else "dms"
    entry = {"value": _angle_text(p.name, p.value), "degrees": p.value * to_deg,
             "unit": f"{unit} (uncertainty in mas)", "uncertainty": unc_mas}
    if prefit is not None:
        entry["prefit"] = _angle_text(prefit.name, prefit.value)
    entry["free"] = bool(p.free)
    return entry


def position_summary(astrometry: Astrometry, result=None) -> dict:
    """The position in both frames, sexagesimal and degrees, uncertainties in
    mas. With a FitResult the fitted covariance (correlations included) is
    carried between frames; else the parameters' own uncertainties."""
    lon, lat = astrometry.frame_angles_rad()
    cov = astrometry.frame_covariance(result)
    pm_lon, pm_lat = astrometry.pm_longitude.value, astrometry.pm_latitude.value
    same = rotate_position(lon, lat, pm_lon, pm_lat, np.eye(3), cov)
    if astrometry.frame == "equatorial":
        eq, ecl = same, equatorial_to_ecliptic(lon, lat, pm_lon, pm_lat, cov)
    else:
        ecl, eq = same, ecliptic_to_equatorial(lon, lat, pm_lon, pm_lat, cov)

    def mas(x):
        return None if x is None else float(x) * RAD_TO_MAS

    def block(d, lon_name, lat_name, lon_text, lat_text, pm_lon_key, pm_lat_key):
        on_sky = None if d.get("lon_err_rad") is None else \
            mas(d["lon_err_rad"]) * math.cos(d["lat_rad"])
        return {
            lon_name: lon_text, f"{lon_name}_deg": math.degrees(d["lon_rad"]),
            f"{lon_name}_uncertainty_mas": mas(d.get("lon_err_rad")),
            f"{lon_name}_uncertainty_on_sky_mas": on_sky,
            lat_name: lat_text, f"{lat_name}_deg": math.degrees(d["lat_rad"]),
            f"{lat_name}_uncertainty_mas": mas(d.get("lat_err_rad")),
            pm_lon_key: d["pm_lon_coslat"], f"{pm_lon_key}_uncertainty": d.get("pm_lon_coslat_err"),
            pm_lat_key: d["pm_lat"], f"{pm_lat_key}_uncertainty": d.get("pm_lat_err"),
        }

    out = {
        "frame_of_model": astrometry.frame,
        "epoch_mjd": str(mjd_decimal(astrometry.epoch_day, astrometry.epoch_frac)),
        "equatorial": block(eq, "ra", "dec", format_ra(eq["lon_rad"]), format_dec(eq["lat_rad"]),
                            "pm_ra_cosdec_mas_per_yr", "pm_dec_mas_per_yr"),
        "ecliptic": block(ecl, "ecliptic_longitude", "ecliptic_latitude",
                          format_longitude_dms(math.degrees(ecl["lon_rad"])),
                          format_dec(ecl["lat_rad"]), "pm_longitude_coslat_mas_per_yr",
                          "pm_latitude_mas_per_yr"),
        "total_proper_motion_mas_per_yr": math.hypot(eq["pm_lon_coslat"], eq["pm_lat"]),
        "parallax_mas": astrometry.parallax.value,
        "parallax_uncertainty_mas": astrometry.parallax.uncertainty,
        "distance_kpc": astrometry.distance_kpc,
        "ecliptic_frame": ECLIPTIC_FRAME_NOTE,
        "note": ("uncertainties carried between frames to first order"
                 + (" with the fitted correlations" if result is not None else
                    " (parameters' own uncertainties, as uncorrelated)")),
    }
    return out


def _scaled(value, factor):
    return None if value is None else float(value) * factor


def _present(unc: dict, angles: bool, motion: bool) -> dict:
    keys = list(unc)
    keep = keys[:2] if angles else []
    keep += keys[2:] if motion else []
    return {k: unc[k] for k in keep if unc[k] is not None}


__all__ = ["Astrometry", "format_ra", "format_dec", "parse_angle", "SECONDS_PER_DAY",
           "equatorial_to_ecliptic", "ecliptic_to_equatorial",
           "position_summary", "angle_entry", "ECLIPTIC_OBLIQUITY_ARCSEC", "ICRS_TO_ECLIPTIC"]
