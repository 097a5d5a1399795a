"""Positions of the bodies whose Shapiro delay is applied (the Sun and the
planets), once per data set and vectorised.

Each body is taken where the light passed it: at the retarded time
t - |x_body - x_Earth| / c (43 min for Jupiter, in which it moves ~34,000 km,
half its radius; 4 h for Neptune). The ephemeris is evaluated only on whole
TDB days next to the TOAs (two evaluations per body, for the retardation) and
each TOA's position follows by cubic Hermite interpolation (positions and
velocities) on its day. Interpolation error, measured against jplephem at
every retarded time: 3 mm for the Sun, < 0.5 m for Jupiter to Neptune, 10 m
for Mars, 200 m for Venus, 20 km for Mercury; none changes a Shapiro term
by 1e-13 s, even at a grazing line of sight (the sensitivity is
4 GM/c^3 db/b at impact parameter b). The cost does not grow with the number
of bodies times the number of TOAs through the ephemeris' Chebyshev series
(about 0.15 s per body per 200,000 TOAs), only through the interpolation.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from timingkit.formats.errors import InputError, excerpt
from timingkit.geometry.delays import SPEED_OF_LIGHT_M_PER_S
from timingkit.geometry.ephemeris import Ephemeris
from timingkit.numerics.timearray import MJD_TO_JD, SECONDS_PER_DAY, SplitTime

# The planets whose system barycentres a JPL ephemeris holds (NAIF 1-8, without the
# Earth, on which we stand); Pluto, a dwarf planet, is left out (GM/c^3 = 5e-15 s).
PLANETS = ("mercury", "venus", "mars", "jupiter", "saturn", "uranus", "neptune")


def shapiro_planets(setting, ephemeris: Ephemeris, path: str | None = None) -> list[str]:
    """The planets to include for the model setting ``settings.shapiro_delay_planets``:
    true = every planet of PLANETS the ephemeris holds, false = none, or a
    list of names (each must be a planet the ephemeris holds)."""
    if setting is True:
        return [p for p in PLANETS if ephemeris.has_body(p)]
    if setting is False or setting is None:
        return []
    out = []
    for name in setting:
        if name not in PLANETS:
            raise InputError(f"unknown planet {excerpt(name)} in settings.shapiro_delay_planets; "
                             f"legal: {', '.join(PLANETS)} (or true / false)", path=path,
                             field="settings.shapiro_delay_planets", quoted=(name,))
        if not ephemeris.has_body(name):
            raise InputError(f"the ephemeris {ephemeris.label} holds no {name}; remove it from "
                             "settings.shapiro_delay_planets", path=path,
                             field="settings.shapiro_delay_planets")
        if name not in out:
            out.append(name)
    return out


def _nodes(day: np.ndarray, ephemeris: Ephemeris) -> np.ndarray:
    """Whole TDB days (MJD) bracketing every time, clamped into the file's span:
    every day of the span when the TOAs are dense, else only the TOAs' days."""
    first, last = float(day.min()), float(day.max()) + 1.0
    if last - first <= 2 * len(day):
        nodes = np.arange(first, last + 1.0)
    else:
        nodes = np.unique(np.concatenate([day, day + 1.0]))
    lo, hi = ephemeris.start_jd - MJD_TO_JD, ephemeris.end_jd - MJD_TO_JD
    return np.unique(np.clip(nodes, lo, hi))


def _retarded_node_states(ephemeris: Ephemeris, body: str, node_jd: np.ndarray,
                          earth_m: np.ndarray, earth_vel_m_per_s: np.ndarray):
    """Position and d/dt of x_body(t - delta(t)) at the nodes, delta = |x_body - x_Earth|/c."""
    zero = np.zeros_like(node_jd)
    pos, _ = ephemeris.posvel_jd(body, node_jd, zero, velocity=False)
    delta1 = np.linalg.norm(pos - earth_m, axis=1) / SPEED_OF_LIGHT_M_PER_S
    lo, hi = ephemeris.start_jd, ephemeris.end_jd
    shift_days = np.clip(node_jd - delta1 / SECONDS_PER_DAY, lo, hi) - node_jd
    pos, vel = ephemeris.posvel_jd(body, node_jd, shift_days)
    rho = earth_m - pos
    dist = np.linalg.norm(rho, axis=1)
    delta2 = dist / SPEED_OF_LIGHT_M_PER_S
    pos = pos - vel * (delta2 - delta1)[:, None]       # one more light-time step
    # d/dt x(t - delta) = v (1 - d(delta)/dt), d(delta)/dt = rho_hat . (v_Earth - v) / c
    rate = np.einsum("ij,ij->i", rho / dist[:, None], earth_vel_m_per_s - vel) \
        / SPEED_OF_LIGHT_M_PER_S
    return pos, vel * (1.0 - rate)[:, None]


@dataclass
class BodyTrack:
    """Retarded positions of some bodies on whole TDB days (``nodes``, MJD),
    and the TDB MJD of each TOA: positions per TOA follow on demand, so a data
    set keeps ~50 bytes per body per day instead of 24 per body per TOA."""
    nodes: np.ndarray
    states: dict[str, tuple[np.ndarray, np.ndarray]]   # body -> (position m, velocity m/s)
    mjd: np.ndarray
    earth_m: np.ndarray                                 # the geocentre at the nodes

    @property
    def bodies(self) -> list[str]:
        return list(self.states)

    def select(self, index) -> "BodyTrack":
        return BodyTrack(self.nodes, self.states, self.mjd[index], self.earth_m)

    def _weights(self):
        nodes, mjd = self.nodes, self.mjd
        j = np.clip(np.searchsorted(nodes, mjd, side="right") - 1, 0, max(len(nodes) - 2, 0))
        if len(nodes) == 1:                               # every time on the one node
            zero = np.zeros_like(mjd)
            return j, j, (np.ones_like(mjd), zero, zero, zero)
        j1 = j + 1
        h_days = nodes[j1] - nodes[j]
        s = (mjd - nodes[j]) / h_days
        h_s = h_days * SECONDS_PER_DAY
        s2 = s * s
        return j, j1, (1.0 - 3.0 * s2 + 2.0 * s2 * s, (s - 2.0 * s2 + s2 * s) * h_s,
                       3.0 * s2 - 2.0 * s2 * s, (s2 * s - s2) * h_s)

    def positions(self, bodies=None) -> dict[str, np.ndarray]:
        """Barycentric positions (m, (N, 3)) at each TOA's retarded time
        (cubic Hermite on the day's two nodes)."""
        return dict(self.iter_positions(bodies))

    def iter_positions(self, bodies=None):
        """(body, positions) one body at a time, so only one (N, 3) array lives."""
        j, j1, weights = self._weights()
        w00, w10, w01, w11 = (w[:, None] for w in weights)
        for body in self.bodies if bodies is None else bodies:
            pos, vel = self.states[body]
            x = pos[j]                   # in place: fewer temporaries
            x *= w00
            x += w01 * pos[j1]
            x += w10 * vel[j]
            x += w11 * vel[j1]
            yield body, x

    def geocentre_potential_m2_per_s2(self, bodies, gm_m3_per_s2: dict) -> np.ndarray:
        """sum GM / |x_Earth - x_body| at each TOA (interpolated linearly between
        the nodes: the potential is smooth; error < 1e-4 of the planets' ~3e-12 c^2)."""
        at_nodes = np.zeros(len(self.nodes))
        for body in bodies:
            at_nodes += gm_m3_per_s2[body] / np.linalg.norm(self.earth_m - self.states[body][0],
                                                           axis=1)
        return np.interp(self.mjd, self.nodes, at_nodes)


class PlanetVectors(Mapping):
    """Planet -> observer vectors (m, (N, 3)) of a data set, computed when asked
    (not kept: 24 bytes per planet per TOA)."""

    def __init__(self, track: BodyTrack | None, observer_m: np.ndarray):
        self._track, self._observer = track, observer_m

    def __getitem__(self, body: str) -> np.ndarray:
        if self._track is None or body not in self._track.states:
            raise KeyError(body)
        return self._observer - self._track.positions([body])[body]

    def __contains__(self, body) -> bool:
        return self._track is not None and body in self._track.states

    def __iter__(self):
        return iter([] if self._track is None else self._track.bodies)

    def __len__(self) -> int:
        return 0 if self._track is None else len(self._track.states)


def retarded_track(ephemeris: Ephemeris, bodies, tdb: SplitTime) -> BodyTrack:
    """The :class:`BodyTrack` of ``bodies`` for these TDB times (module docstring)."""
    mjd = tdb.day + tdb.frac
    if len(mjd):
        nodes = _nodes(np.floor(mjd), ephemeris)
    else:
        nodes = np.array([np.ceil(ephemeris.start_jd - MJD_TO_JD)])
    node_jd = nodes + MJD_TO_JD
    earth, earth_vel = ephemeris.posvel_jd("earth", node_jd, np.zeros_like(node_jd))
    states = {body: _retarded_node_states(ephemeris, body, node_jd, earth, earth_vel)
              for body in bodies}
    return BodyTrack(nodes, states, mjd, earth)


def retarded_positions(ephemeris: Ephemeris, bodies, tdb: SplitTime) -> dict[str, np.ndarray]:
    """Barycentric positions (m, (N, 3)) of ``bodies`` at the retarded time of
    each TDB time (see the module docstring)."""
    return retarded_track(ephemeris, bodies, tdb).positions()
