"""The ground observer of an OGIP event list that gives OBSGEO-X/Y/Z and no
``--site`` (README, "Where the events were observed").

Such a file usually also names its observatory (OBSERVAT, else TELESCOP; the
events table's keywords before the primary header's). When a name is a known
site (any of its names) and OBSGEO lies within :data:`OBSGEO_TOLERANCE_M` of
that site's position, the events are timed at the site: its own name, its
site-file position and its clock tables. When they lie farther apart the
file's OBSGEO position is kept (under the name ``obsgeo``, with no clock table)
and a warning names both and the distance. Without a known name OBSGEO is used
as before. A locally timed list without OBSGEO that names a known site is
timed at that site (:func:`named_site_observer`), not at the geocentre.
"""

from __future__ import annotations

import numpy as np

from timingkit.formats.event_list import EventList
from timingkit.formats.site_file import BUILTIN_SITES, Site
from timingkit.geometry.observer import Observer
from timingkit.geometry.sites import SiteTable

# OBSGEO this close to a named site's position is taken to be that site: using
# the site's position instead then changes the Roemer delay by at most
# 100 m / c = 0.33 µs, and the margin leaves room for OBSGEO written rounded or
# from another survey of the array; a position farther off is more likely
# another place (or a wrong name).
OBSGEO_TOLERANCE_M = 100.0


def named_site(events: EventList, sites: SiteTable):
    """(keyword, value, site) of the first OBSERVAT/TELESCOP value that is a known
    ground site, or None."""
    for keyword, value in events.observatory_names:
        if value in sites:
            site = sites.lookup(value)
            if site.kind == "earth":
                return keyword, value, site
    return None


def obsgeo_observer(events: EventList, sites: SiteTable, clocks
                    ) -> tuple[Observer, list[str], dict]:
    """The observer at OBSGEO-X/Y/Z (see the module docstring), the warnings,
    and what was decided (the report's ``settings.observer.obsgeo_check``)."""
    xyz = np.asarray(events.observer_itrf_m, dtype=float)
    check = {"obsgeo_itrf_m": [float(v) for v in xyz], "tolerance_m": OBSGEO_TOLERANCE_M,
             "named_by": None}
    named = named_site(events, sites)
    if named is not None:
        keyword, value, site = named
        distance_m = float(np.linalg.norm(np.asarray(site.geocentric_itrf_m) - xyz))
        check.update(named_by=f"{keyword} = '{value}'", site=site.name, distance_m=distance_m)
        if distance_m <= OBSGEO_TOLERANCE_M:
            check["used"] = f"site {site.name}: its site-file position and clock tables"
            note = (f"site {site.name}, named by {keyword} = '{value}'; OBSGEO-X/Y/Z lie "
                    f"{distance_m:.3g} m from its position (within {OBSGEO_TOLERANCE_M:g} m), "
                    f"so the site's position ({site.coordinates_from or 'site file'}) and "
                    "clock tables are used")
            return Observer("earth", events.scale, site=site, sites=sites, clocks=list(clocks),
                            description=note), [], check
    own = Site("obsgeo", "earth", xyz, (), f"OBSGEO-X/Y/Z keywords of {events.path}",
               clock_advice="a clock table applies only at a named site: time the events at "
                            "one with --site NAME")
    check["used"] = "the OBSGEO-X/Y/Z position (observer 'obsgeo', no clock table)"
    warnings = []
    if named is not None:
        warnings.append(
            f"{keyword} = '{value}' names site {site.name}, but OBSGEO-X/Y/Z lie "
            f"{distance_m / 1e3:.3f} km from its position (more than {OBSGEO_TOLERANCE_M:g} m): "
            f"the events are timed at the OBSGEO position, without site {site.name}'s clock "
            f"tables; give --site {site.name} to time them at the site")
    return Observer("earth", events.scale, site=own, sites=SiteTable([*BUILTIN_SITES, own]),
                    clocks=list(clocks),
                    description="position from the file's OBSGEO-X/Y/Z keywords"), warnings, check


def named_site_observer(events: EventList, sites: SiteTable, clocks) -> Observer | None:
    """For a locally timed list without OBSGEO-X/Y/Z: the known ground site that
    OBSERVAT/TELESCOP names (its position and clock tables), or None."""
    named = named_site(events, sites)
    if named is None:
        return None
    keyword, value, site = named
    note = (f"site {site.name}, named by {keyword} = '{value}' (the file gives no "
            f"OBSGEO-X/Y/Z): the site's position ({site.coordinates_from or 'site file'}) "
            "and clock tables are used")
    return Observer("earth", events.scale, site=site, sites=sites, clocks=list(clocks),
                    description=note)
