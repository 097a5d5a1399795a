"""Where and when each TOA was observed, on the way to the barycentre.

- ``timescales``: UTC -> TT (astropy's leap seconds) -> TDB at the site (erfa.dtdb, gridded).
- ``utc_seconds``: OGIP TIME on UTC (elapsed seconds from MJDREF) to TT, one constant.
- ``earth_orientation``: UT1-UTC, polar motion and the celestial pole from the bundled IERS tables.
- ``sites``: :class:`SiteTable` and fast GCRS position/velocity of a site.
- ``ephemeris``: JPL SPK ephemerides through jplephem (built-in DE421).
- ``shapiro_bodies``: the Sun and planets at their retarded positions, once per data set.
- ``delays``: Roemer, Shapiro and dispersion formulae, the barycentric frequency (pure functions).
- ``solar_approach``: how close each line of sight passes the Sun (warning, refusal).
- ``observations``: per-TOA time scales and geometry, computed once per data set.
- ``spacecraft``: :class:`SpacecraftTrajectory`, an observer given by its GCRS orbit
  (interpolated, error stated per region; TDB and Roemer from its own position).
- ``observer``: :class:`Observer`, where photon events were observed (site, geocentre,
  barycentre or spacecraft), turning event times into Observations.
"""

from timingkit import lazy_exports

EXPORTS = {
    "SiteTable": "sites", "Ephemeris": "ephemeris", "load_ephemeris": "ephemeris",
    "Observations": "observations", "prepare_observations": "observations",
    "SpacecraftTrajectory": "spacecraft", "Observer": "observer",
    "utc_elapsed_to_tt": "utc_seconds",
    "retarded_positions": "shapiro_bodies", "closest_approach_m": "solar_approach",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
