"""Per-TOA geometry and time scales, computed once per data set.

``prepare_observations`` carries every TOA from its site clock to TDB at the
site and computes the observer's barycentric position and velocity, the
Sun -> observer and planet -> observer vectors (bodies at their retarded
positions, timingkit.geometry.shapiro_bodies; every planet the ephemeris
holds by default) and the rate of TDB against the observer's clock. The
timing model then needs only cheap vector algebra per fit iteration.
Everything here is independent of the timing-model parameters.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from timingkit.geometry import earth_orientation
from timingkit.geometry import timescales
from timingkit.geometry.delays import GM_M3_PER_S2, tdb_minus_proper_time_rate
from timingkit.geometry.shapiro_bodies import (BodyTrack, PlanetVectors, retarded_track,
                                               shapiro_planets)
from timingkit.formats.clock_table import ClockTable
from timingkit.geometry.ephemeris import Ephemeris
from timingkit.formats.errors import InputError
from timingkit.geometry.sites import SiteTable, sites_gcrs_posvel
from timingkit.numerics.timearray import SplitTime
from timingkit.formats.toa_table import ToaTable



@dataclass
class Observations:
    toas: ToaTable
    tdb: SplitTime                      # TDB at the observatory
    observer_ssb_m: np.ndarray          # (N, 3)
    observer_ssb_vel_m_per_s: np.ndarray
    sun_to_observer_m: np.ndarray       # (N, 3)
    planet_track: BodyTrack | None      # the planets of the Shapiro delay (None: none)
    barycentric_input: np.ndarray       # bool: TOA given at the barycentre (site 'ssb')
    site_names: np.ndarray              # canonical site name per TOA
    ephemeris_label: str
    clock_corrections: list[str]
    warnings: list[str] = field(default_factory=list)
    # exact TDB minus ``tdb`` (s): what rounding the two-part fractions lost on the
    # way (up to ~10 ps); the spin phase adds it back
    tdb_correction_s: np.ndarray | None = None
    # d(TDB - tau)/dTDB of each observer's clock (0 for barycentric input)
    tdb_minus_proper_time_rate: np.ndarray | None = None
    memo: dict = field(default_factory=dict)    # results the model may reuse (per data set)
    # every name (lowercase) of the sites these TOAs use -> the site's name
    site_labels: dict = field(default_factory=dict)

    @property
    def planet_to_observer_m(self) -> PlanetVectors:
        """Planet -> observer vectors (m, (N, 3)) by planet name, made when asked."""
        return PlanetVectors(self.planet_track, self.observer_ssb_m)

    @property
    def shapiro_bodies(self) -> list[str]:
        """The bodies whose Shapiro delay these observations carry."""
        return ["sun", *self.planet_to_observer_m]

    def __len__(self) -> int:
        return len(self.toas)

    def select(self, index) -> "Observations":
        return Observations(
            toas=self.toas.select(index), tdb=self.tdb[index],
            observer_ssb_m=self.observer_ssb_m[index],
            observer_ssb_vel_m_per_s=self.observer_ssb_vel_m_per_s[index],
            sun_to_observer_m=self.sun_to_observer_m[index],
            planet_track=None if self.planet_track is None else self.planet_track.select(index),
            barycentric_input=self.barycentric_input[index], site_names=self.site_names[index],
            ephemeris_label=self.ephemeris_label, clock_corrections=list(self.clock_corrections),
            warnings=list(self.warnings),
            tdb_correction_s=(None if self.tdb_correction_s is None
                              else self.tdb_correction_s[index]),
            tdb_minus_proper_time_rate=None if self.tdb_minus_proper_time_rate is None
            else self.tdb_minus_proper_time_rate[index], site_labels=dict(self.site_labels))


def prepare_observations(toas: ToaTable, sites: SiteTable, ephemeris: Ephemeris,
                         clock_tables: list[ClockTable] | tuple = (),
                         planets=True, exact: bool = False,
                         model_path: str | None = None) -> Observations:
    """Time scales and geometry for every TOA (see module docstring).

    ``planets``: true (every planet the ephemeris holds), false, or a list of
    planet names (the model's ``settings.shapiro_delay_planets``, read from
    ``model_path``). ``exact``: evaluate the TDB and precession-nutation series
    at every TOA instead of interpolating them on a grid (the interpolation is
    good to ~20 ps in TDB and 0.75 mm in the site position; exact costs ~65 µs
    per TOA, for the few precision-critical times of a phase predictor)."""
    n = len(toas)
    unique_sites, site_index = _resolve_sites(toas, sites)
    day = toas.mjd_day.copy()
    frac = toas.mjd_frac.copy()
    tdb_day = np.empty(n)
    tdb_frac = np.empty(n)
    site_pos = np.zeros((n, 3))
    site_vel = np.zeros((n, 3))
    bary = np.zeros(n, dtype=bool)
    names = np.empty(n, dtype=object)
    warnings: list[str] = []
    used_clocks: list[str] = []
    earth_rows = []
    utc_day, utc_frac = np.zeros(n), np.zeros(n)
    offset_s = np.zeros(n)          # exact seconds from the time as given to TDB
    for k, site in enumerate(unique_sites):
        idx = np.nonzero(site_index == k)[0]
        names[idx] = site.name
        given = SplitTime(day[idx], frac[idx], "utc")
        if site.kind == "ssb":
            bary[idx] = True
            tdb_day[idx], tdb_frac[idx] = given.day, given.frac
        elif site.kind == "geocentre":
            tt = given.with_scale("tt")
            delta = timescales.tdb_minus_tt_s(tt, tt.frac, direct=exact)
            tdb = tt.add_seconds(delta)
            tdb_day[idx], tdb_frac[idx], offset_s[idx] = tdb.day, tdb.frac, delta
        else:
            if not any(table.applies_to(site.name) for table in clock_tables):
                advice = site.clock_advice or "supply a clock table for it in settings.clock"
                warnings.append(f"no clock corrections for site {site.name}: its clock is taken "
                                f"as UTC (errors of up to µs possible; {advice})")
            for table in clock_tables:
                if table.applies_to(site.name):
                    clock_s, warn = table.offset_s(given.mjd, site.name)
                    given = given.add_seconds(clock_s).with_scale("utc")
                    offset_s[idx] += clock_s
                    warnings.extend(warn)
                    used_clocks.append(f"{table.converts} ({table.path})")
            utc_day[idx], utc_frac[idx] = given.day, given.frac
            earth_rows.append(idx)
    if earth_rows:
        # all Earth sites at once: the Earth-orientation and TDB grids are shared
        rows = np.sort(np.concatenate(earth_rows))
        utc = SplitTime(utc_day[rows], utc_frac[rows], "utc")
        tt = timescales.utc_to_tt(utc)
        warnings.extend(timescales.leap_second_warnings(utc))
        warnings.extend(earth_orientation.coverage_warnings(utc))
        eop = earth_orientation.eop_values(utc)      # one interpolation serves TDB and GCRS
        ut1_frac = np.mod(utc.frac + eop[0] / 86400.0, 1.0)
        k_rows = site_index[rows]
        lon = np.array([s.longitude_rad if s.kind == "earth" else 0.0 for s in unique_sites])
        u_km = np.array([s.spin_axis_distance_km if s.kind == "earth" else 0.0
                         for s in unique_sites])
        v_km = np.array([s.equator_distance_km if s.kind == "earth" else 0.0
                         for s in unique_sites])
        delta = timescales.tdb_minus_tt_s(tt, ut1_frac, lon[k_rows], u_km[k_rows],
                                          v_km[k_rows], direct=exact)
        tdb = tt.add_seconds(delta)
        tdb_day[rows], tdb_frac[rows] = tdb.day, tdb.frac
        offset_s[rows] += timescales.tt_minus_utc_s(utc, tt) + delta
        pos, vel = sites_gcrs_posvel(unique_sites, k_rows, utc, tt, eop, direct=exact)
        site_pos[rows] = pos
        site_vel[rows] = vel
    tdb_all = SplitTime(tdb_day, tdb_frac, "tdb")
    lost_hi, lost_lo = tdb_all.seconds_since(day, frac)
    correction_s = (offset_s - lost_hi) - lost_lo
    obs = observations_at(toas, tdb_all, site_pos, site_vel, bary, names.astype(str), ephemeris,
                          planets, clock_corrections=sorted(set(used_clocks)),
                          warnings=_unique(warnings), tdb_correction_s=correction_s,
                          model_path=model_path)
    obs.site_labels = {label.lower(): site.name for site in unique_sites
                       for label in (site.name, *site.other_names)}
    return obs


def observations_at(toas: ToaTable, tdb: SplitTime, geocentric_m: np.ndarray,
                    geocentric_vel_m_per_s: np.ndarray, barycentric_input: np.ndarray,
                    site_names: np.ndarray, ephemeris: Ephemeris, planets=True,
                    clock_corrections=(), warnings=(), tdb_correction_s=None,
                    model_path: str | None = None) -> Observations:
    """Observations of observers at the given GCRS offsets from the Earth's
    centre (m, m/s) at TDB ``tdb``: the Earth from the ephemeris plus the
    offset (no aberration; DESIGN.md §3), the Sun and planets (``planets`` as
    for :func:`prepare_observations`) and the clock rate. Rows
    with ``barycentric_input`` sit at the barycentre. Shared by TOA sites and
    spacecraft (timingkit.geometry.spacecraft)."""
    bary = np.asarray(barycentric_input, dtype=bool)
    ephemeris.check_span(tdb, where=toas.path, line_numbers=toas.line_numbers)
    planet_names = shapiro_planets(planets, ephemeris, model_path)
    earth_pos, earth_vel = ephemeris.posvel("earth", tdb)
    observer = np.where(bary[:, None], 0.0, earth_pos + geocentric_m)
    observer_vel = np.where(bary[:, None], 0.0, earth_vel + geocentric_vel_m_per_s)
    sun_track = retarded_track(ephemeris, ["sun"], tdb)
    sun_to_observer = observer - sun_track.positions()["sun"]
    planet_track = retarded_track(ephemeris, planet_names, tdb) if planet_names else None
    planets_potential = 0.0 if planet_track is None else \
        planet_track.geocentre_potential_m2_per_s2(planet_names, GM_M3_PER_S2)
    rate = np.where(bary, 0.0, tdb_minus_proper_time_rate(
        observer_vel, {"sun": sun_to_observer}, planets_potential))
    return Observations(
        toas=toas, tdb=tdb, observer_ssb_m=observer, observer_ssb_vel_m_per_s=observer_vel,
        sun_to_observer_m=sun_to_observer, planet_track=planet_track,
        barycentric_input=bary, site_names=np.asarray(site_names), ephemeris_label=ephemeris.label,
        clock_corrections=list(clock_corrections), warnings=list(warnings),
        tdb_correction_s=tdb_correction_s, tdb_minus_proper_time_rate=rate)


def _resolve_sites(toas: ToaTable, sites: SiteTable):
    """Site per TOA; an unknown name is reported at its first line in the table."""
    try:
        return sites.resolve_many(toas.site)
    except InputError as exc:
        for row, name in enumerate(toas.site):
            try:
                sites.lookup(str(name))
            except InputError:
                line = None if toas.line_numbers is None else int(toas.line_numbers[row])
                raise exc.located(path=toas.path, line=line, field="site") from None
        raise


def _unique(items: list[str]) -> list[str]:
    seen, out = set(), []
    for item in items:
        if item not in seen:
            seen.add(item)
            out.append(item)
    return out
