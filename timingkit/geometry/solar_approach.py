"""The Sun near the line of sight: how close each TOA's line of sight passes
the Sun, a warning for passes within a few solar radii and a refusal of lines
of sight through the solar disc.

Near the Sun the corona adds dispersion (and scattering) far beyond any
spherical solar-wind model, and the solar Shapiro delay grows to ~100 µs at
the limb; inside the disc no pulse is seen at all, so a TOA there is a wrong
date, a wrong position or a wrong site.
"""

from __future__ import annotations

import numpy as np

from timingkit.formats.errors import InputError

SOLAR_RADIUS_M = 6.957e8            # IAU 2015 Resolution B3 nominal solar radius
WARN_WITHIN_SOLAR_RADII = 5.0       # common practice: the corona dominates inside ~5-10 R_sun
MAX_LINES_NAMED = 5


def closest_approach_m(sun_to_observer_m: np.ndarray, direction: np.ndarray) -> np.ndarray:
    """Distance (m) from the Sun's centre to the nearest point of each line of
    sight, the ray from the observer towards the pulsar: the impact parameter
    |rho - (rho.n) n| when the Sun lies ahead (rho.n < 0, rho = Sun -> observer),
    else the observer's own distance |rho|."""
    direction = np.broadcast_to(direction, sun_to_observer_m.shape)
    along = np.einsum("ij,ij->i", sun_to_observer_m, direction)
    dist2 = np.einsum("ij,ij->i", sun_to_observer_m, sun_to_observer_m)
    impact = np.sqrt(np.maximum(dist2 - along ** 2, 0.0))
    return np.where(along < 0.0, impact, np.sqrt(dist2))


def solar_approach_warnings(obs, direction: np.ndarray) -> list[str]:
    """Warnings about TOAs whose line of sight passes within
    WARN_WITHIN_SOLAR_RADII of the Sun (count, closest approach, MJD range);
    InputError naming the lines of the TOA table whose line of sight crosses
    the solar disc. TOAs given at the barycentre are not checked."""
    radii = closest_approach_m(obs.sun_to_observer_m, direction) / SOLAR_RADIUS_M
    radii = np.where(obs.barycentric_input, np.inf, radii)
    mjd = obs.toas.mjd_day + obs.toas.mjd_frac
    inside = np.flatnonzero(radii < 1.0)
    if len(inside):
        lines = obs.toas.line_numbers
        named = ""
        line = None
        if lines is not None:
            line = int(lines[inside[0]])
            shown = ", ".join(str(int(lines[i])) for i in inside[:MAX_LINES_NAMED])
            named = f" (lines {shown}{' ...' if len(inside) > MAX_LINES_NAMED else ''})"
        raise InputError(
            f"{len(inside)} TOA(s){named} have a line of sight through the solar disc "
            f"(closest {radii[inside].min():.2f} solar radii from the Sun's centre, MJD "
            f"{mjd[inside].min():.3f}-{mjd[inside].max():.3f}): no "
            "pulse reaches the telescope through the Sun; check the dates, position and site, "
            "or remove these TOAs", path=obs.toas.path, line=line, field="mjd")
    near = np.flatnonzero(radii < WARN_WITHIN_SOLAR_RADII)
    if not len(near):
        return []
    closest = int(near[np.argmin(radii[near])])
    return [f"{len(near)} TOA(s) have a line of sight within {WARN_WITHIN_SOLAR_RADII:g} solar "
            f"radii of the Sun (MJD {mjd[near].min():.3f}-{mjd[near].max():.3f}; closest "
            f"{radii[closest]:.2f} solar radii at MJD {mjd[closest]:.3f}): the solar corona adds "
            "dispersion and scattering there that no model here removes; consider leaving "
            "them out"]
