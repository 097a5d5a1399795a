"""Shared pieces of the photon-event tests: an invented model, an invented
ground site far from any observatory, OGIP FITS lists written by hand with
astropy, and an invented circular orbit."""

from __future__ import annotations

import numpy as np

# Invented source (not a real pulsar) and an invented site in the central
# Sahara (far from any observatory), with its own site file.
MODEL = """name = "test-xray"
[position]
ra = "05h12m33.4567s"
dec = "+21d02m11.234s"
pm_ra_cosdec_mas_per_yr = 4.0
pm_dec_mas_per_yr = -2.0
epoch_mjd = "58000"
[spin]
epoch_mjd = "58000"
frequency_hz = "29.7123456789"
frequency_derivatives = ["-3.1e-10"]
"""

SITE_FILE = """[site.dune-array]
longitude_deg = 12.5
latitude_deg = 24.0
height_m = 600.0
coordinates_from = "invented test site"
"""


def write_inputs(folder, model_text: str = MODEL, settings: str = ""):
    """model.toml naming sites.toml (plus ``settings`` lines), both in ``folder``;
    returns their paths."""
    sites = folder / "sites.toml"
    sites.write_text(SITE_FILE)
    model = folder / "model.toml"
    model.write_text(model_text + '[settings]\nsites = "sites.toml"\n' + settings)
    return model, sites


def ogip_events(path, time_s, keywords: dict, columns=None, gti=None, gti_keywords=None,
                extname: str = "EVENTS"):
    """Write an event list with astropy.io.fits: TIME plus ``columns`` {name: (format,
    unit, values)}, the header ``keywords``, and optionally a GTI table."""
    from astropy.io import fits
    cols = [fits.Column("TIME", "D", unit="s", array=np.asarray(time_s, dtype=float))]
    for name, (fmt, unit, values) in (columns or {}).items():
        cols.append(fits.Column(name, fmt, unit=unit, array=values))
    events = fits.BinTableHDU.from_columns(cols, name=extname)
    for key, value in keywords.items():
        events.header[key] = value
    hdus = [fits.PrimaryHDU(), events]
    if gti is not None:
        gti = np.asarray(gti, dtype=float)
        table = fits.BinTableHDU.from_columns(
            [fits.Column("START", "D", unit="s", array=gti[:, 0]),
             fits.Column("STOP", "D", unit="s", array=gti[:, 1])], name="GTI")
        for key, value in (gti_keywords if gti_keywords is not None else keywords).items():
            table.header[key] = value
        hdus.append(table)
    fits.HDUList(hdus).writeto(path, overwrite=True)
    return path


TT_KEYWORDS = {"MJDREFI": 58000, "MJDREFF": 0.0, "TIMESYS": "TT", "TIMEREF": "LOCAL",
               "TIMEUNIT": "s", "TIMEZERO": 0.0}


def circular_orbit_state(seconds, radius_m=6928137.0, inclination_deg=28.5):
    """Position and velocity of an invented circular orbit (computed here, by
    hand, independently of timingkit.events.simulate): an orbit of the given
    radius about a point-mass Earth, GM = 3.986004418e14 m^3/s^2 (IERS
    Conventions 2010, Table 1.1), in a plane tilted about the x axis."""
    rate = np.sqrt(3.986004418e14 / radius_m ** 3)
    angle = rate * np.asarray(seconds, dtype=float)
    inc = np.radians(inclination_deg)
    x = radius_m * np.cos(angle)
    y = radius_m * np.sin(angle)
    pos = np.stack([x, y * np.cos(inc), y * np.sin(inc)], axis=1)
    vx = -radius_m * rate * np.sin(angle)
    vy = radius_m * rate * np.cos(angle)
    vel = np.stack([vx, vy * np.cos(inc), vy * np.sin(inc)], axis=1)
    return pos, vel


def write_orbit(path, start_mjd: float, end_mjd: float, step_s: float, velocities=True):
    """A text orbit table of ``circular_orbit_state`` (times TT, seconds from
    the start's whole day)."""
    day = np.floor(start_mjd)
    seconds = np.arange((start_mjd - day) * 86400.0, (end_mjd - day) * 86400.0 + step_s, step_s)
    pos, vel = circular_orbit_state(seconds)
    lines = ["# scale: tt", "mjd x_m y_m z_m" + (" vx_m_per_s vy_m_per_s vz_m_per_s"
                                                 if velocities else "")]
    for s, p, v in zip(seconds, pos, vel):
        whole, part = divmod(s, 86400.0)
        text = f"{int(day + whole)}.{int(round(part / 86400.0 * 1e15)):015d}"
        row = [*p, *v] if velocities else list(p)
        lines.append(text + " " + " ".join(f"{x:.6f}" for x in row))
    path.write_text("\n".join(lines) + "\n")
    return path
