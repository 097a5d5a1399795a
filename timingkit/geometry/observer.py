"""Where a list of photon events was observed: a site on the Earth, the
geocentre, the barycentre, or a spacecraft on its orbit.

:class:`Observer` turns times on a continuous scale (TT, or TDB for the
barycentre and for geocentric TDB stamps) into :class:`Observations` through
the same chain as TOAs: sites, the geocentre and the barycentre go through
``prepare_observations`` (clock tables included), a spacecraft through
``timingkit.geometry.spacecraft``. Event times in UTC are first carried to TT
(``to_continuous``), so that time is smooth across leap seconds.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from timingkit.formats.clock_table import ClockTable
from timingkit.formats.errors import InputError
from timingkit.formats.site_file import Site
from timingkit.formats.toa_table import ToaTable
from timingkit.geometry import timescales
from timingkit.geometry.ephemeris import Ephemeris
from timingkit.geometry.observations import Observations, prepare_observations
from timingkit.geometry.sites import SiteTable
from timingkit.geometry.spacecraft import SpacecraftTrajectory, spacecraft_observations
from timingkit.numerics.timearray import SplitTime

KINDS = ("ssb", "geocentre", "earth", "spacecraft")


@dataclass
class Observer:
    """``kind``: 'ssb', 'geocentre', 'earth' (``site``) or 'spacecraft'
    (``trajectory``); ``sites`` resolves the site in the TOA chain."""
    kind: str
    input_scale: str
    site: Site | None = None
    trajectory: SpacecraftTrajectory | None = None
    sites: SiteTable = field(default_factory=SiteTable)
    clocks: list[ClockTable] = field(default_factory=list)
    description: str = ""

    def __post_init__(self):
        if self.kind not in KINDS:
            raise ValueError(f"observer kind must be one of {KINDS}, not {self.kind!r}")
        allowed = {"ssb": ("tdb",), "geocentre": ("tt", "utc", "tdb"), "earth": ("utc", "tt"),
                   "spacecraft": ("tt", "utc")}[self.kind]
        if self.input_scale not in allowed:
            where = {"ssb": "at the barycentre", "geocentre": "at the geocentre",
                     "earth": f"at site {self.site.name if self.site else ''}",
                     "spacecraft": "on a spacecraft"}[self.kind]
            raise InputError(f"event times in {self.input_scale.upper()} {where} are not "
                             f"supported; expected {' or '.join(s.upper() for s in allowed)}",
                             field="TIMESYS")

    @property
    def continuous_scale(self) -> str:
        return "tdb" if self.input_scale == "tdb" else "tt"

    @property
    def label(self) -> str:
        if self.kind == "earth":
            return f"site {self.site.name}"
        if self.kind == "spacecraft":
            return f"spacecraft (orbit {self.trajectory.path})"
        return {"ssb": "barycentre (times already barycentric)",
                "geocentre": "geocentre"}[self.kind]

    def to_continuous(self, times: SplitTime) -> SplitTime:
        """Event times on the continuous scale (UTC -> TT; others unchanged)."""
        if times.scale == "utc":
            return timescales.utc_to_tt(times)
        return times

    def observations(self, times: SplitTime, ephemeris: Ephemeris,
                     planets: bool | list = False) -> Observations:
        """Observations at ``times`` on ``continuous_scale``."""
        if times.scale != self.continuous_scale:
            raise ValueError(f"times must be on {self.continuous_scale}, not {times.scale}")
        if self.kind == "spacecraft":
            return spacecraft_observations(times, self.trajectory, ephemeris, planets)
        if self.kind == "ssb":
            given, name = times, "ssb"
        elif self.kind == "geocentre":
            given = timescales.tdb_to_tt_geocentric(times) if times.scale == "tdb" else times
            name = "geocentre"
        else:
            given, name = timescales.tt_to_utc(times), self.site.name
        n = len(given)
        toas = ToaTable(mjd_text=np.full(n, "", dtype="<U1"), mjd_day=given.day,
                        mjd_frac=given.frac, err_us=np.ones(n), freq_mhz=np.full(n, np.inf),
                        site=np.full(n, name))
        return prepare_observations(toas, self.sites, ephemeris, self.clocks, planets=planets)

    def summary(self) -> dict:
        out = {"kind": self.kind, "observer": self.label, "input_time_scale": self.input_scale}
        if self.kind == "earth":
            out["site"] = self.site.name
            out["coordinates_from"] = self.site.coordinates_from
        if self.kind == "spacecraft":
            out.update(self.trajectory.summary())
        if self.description:
            out["note"] = self.description
        return out
