"""Photon events from files to results: ``timingkit events``, ``event-toas`` and
``simulate-events`` (:func:`fold_event_files`, :func:`event_toa_files`,
:func:`simulate_event_file`).

Everything is read, checked and computed before the first output is written;
each output is written atomically, and the input files are opened read-only.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np

from timingkit.events.barycentre import (EventClock, EventTiming, event_clock, time_events,
                                         valid_span)
from timingkit.formats.errors import InputError
from timingkit.formats.event_list import EventList, read_event_list, select_events
from timingkit.geometry.delays import PLANET_MASSES_SOURCE
from timingkit.geometry.ephemeris import Ephemeris
from timingkit.geometry.observer import Observer
from timingkit.geometry.shapiro_bodies import shapiro_planets
from timingkit.geometry.sites import SiteTable
from timingkit.model.timing_model import TimingModel
from timingkit.numerics.timearray import SECONDS_PER_DAY, SplitTime
from timingkit.outputs.folder_lock import lock_output, refuse_if_locked
from timingkit.pipeline.obsgeo_site import named_site_observer, obsgeo_observer
from timingkit.pipeline.inputs import (input_paths, load_context, load_model,
                                       reference_observations)

# Time bins wider than this share of the spin period: warn. A bin of width w
# convolves the profile with a box, multiplying harmonic k by sinc(k w f): at
# w f = 0.01 the fundamental keeps 99.98%, the 20th harmonic (the most the H-test
# uses) 93.6%, and a peak is broadened by 0.01 cycles, a third of one bin of
# the default 32-bin profile; below it the smearing is small next to the
# profile's own bins.
SMEARING_FRACTION = 0.01
HIGHEST_HARMONIC = 20        # the H-test's maximum, for the amplitude kept
LOW_ORBIT_WARNING = ("no orbit given for events observed at a local clock (TIMEREF = LOCAL): "
                     "they are treated as observed at the geocentre, which for a spacecraft in "
                     "low Earth orbit is off by up to ~23 ms of light travel; give --orbit FILE "
                     "(or --site NAME for a ground array)")


@dataclass
class EventInputs:
    events: EventList
    model: TimingModel
    observer: Observer
    ephemeris: Ephemeris
    reference: object
    index: np.ndarray
    selection: dict
    warnings: list[str] = field(default_factory=list)
    obsgeo_check: dict | None = None


def resolve_observer(events: EventList, site_name: str | None, orbit_path: str | None,
                     sites: SiteTable, clocks) -> tuple[Observer, list[str], dict | None]:
    """Where the events were observed, from the options and the file (README), the
    warnings, and for an OBSGEO position how it was matched to a named site."""
    from timingkit.formats.orbit_table import read_orbit_table
    from timingkit.geometry.spacecraft import SpacecraftTrajectory
    warnings: list[str] = []
    if site_name is not None and orbit_path is not None:
        raise InputError("give a site or an orbit, not both", field="orbit")
    site_name = site_name if site_name is not None else events.site
    if events.timeref == "solarsystem":
        if site_name is not None or orbit_path is not None:
            raise InputError("the events are already barycentric (TIMEREF = SOLARSYSTEM): no "
                             "--site or --orbit", path=events.path, field="TIMEREF")
        return Observer("ssb", events.scale, sites=sites), warnings, None
    if orbit_path is not None:
        if events.timeref != "local":
            raise InputError(f"an orbit needs locally observed times; TIMEREF is "
                             f"{events.timeref.upper()}", path=events.path, field="TIMEREF")
        trajectory = SpacecraftTrajectory(read_orbit_table(orbit_path))
        return Observer("spacecraft", events.scale, trajectory=trajectory, sites=sites), warnings, None
    if site_name is not None:
        site = sites.lookup(site_name)
        if events.timeref == "geocentric" and site.kind != "geocentre":
            raise InputError(f"the events are geocentric (TIMEREF = GEOCENTRIC), not at site "
                             f"{site.name}", path=events.path, field="TIMEREF")
        kind = {"earth": "earth", "geocentre": "geocentre", "ssb": "ssb"}[site.kind]
        return Observer(kind, events.scale, site=site, sites=sites, clocks=list(clocks)), warnings, None
    if events.timeref == "geocentric":
        return Observer("geocentre", events.scale, sites=sites), warnings, None
    if events.kind == "text":
        raise InputError("the observer is not stated: add a '# site: NAME' comment (a site, "
                         "geocentre or ssb) or give --site or --orbit", path=events.path,
                         field="site")
    if events.observer_itrf_m is not None:
        return obsgeo_observer(events, sites, clocks)
    named = named_site_observer(events, sites, clocks)
    if named is not None:
        return named, warnings, None
    warnings.append(LOW_ORBIT_WARNING)
    return Observer("geocentre", events.scale, sites=sites,
                    description="no orbit or site given: geocentre assumed"), warnings, None


def load_event_inputs(events_path, model_path, *, site=None, orbit=None, scale=None,
                      energy_range=None, energy_column=None, sites_paths=(), ephemeris=None,
                      clock_paths=()) -> EventInputs:
    model = load_model(model_path)
    sites, eph, clocks = load_context(model, sites_paths, ephemeris, clock_paths)
    events = read_event_list(events_path, scale=scale, site=site)
    observer, warnings, obsgeo_check = resolve_observer(events, site, orbit, sites, clocks)
    if events.kind == "fits" and observer.kind in ("spacecraft", "geocentre") \
            and events.clock_applied is not True:
        warnings.append("the file does not say that the mission's clock correction was applied "
                        f"(CLOCKAPP {'= F' if events.clock_applied is False else 'missing'}): "
                        "event times may carry the spacecraft clock's offset")
    warnings.extend(time_bin_warnings(events, model))
    index, selection = select_events(events, energy_range, energy_column)
    if len(index) == 0:
        raise InputError("no events left after the selection (GTIs, energy range)",
                         path=events.path)
    return EventInputs(events=events, model=model, observer=observer, ephemeris=eph,
                       reference=reference_observations(model, sites, eph, clocks),
                       index=index, selection=selection, warnings=warnings,
                       obsgeo_check=obsgeo_check)


def time_bin_entry(events: EventList, model: TimingModel) -> dict:
    """The time bins of the events (OGIP TIMEDEL, TIMEPIXR) and what was done
    with them, for the report's settings."""
    width_s = events.time_bin_s
    entry = {"events_timed_at": ("centre of each time bin" if width_s else
                                 "the time as written (no bin width given)"),
             "bin_width_s": width_s, "time_pixel_reference": events.time_pixel_reference,
             "shift_to_bin_centre_s": events.bin_centre_shift_s[0] + events.bin_centre_shift_s[1],
             "shift_applied_to": "the reference time (MJDREF + TIMEZERO), in double-double"}
    if width_s:
        fraction = width_s * model.spin.frequency.value
        entry.update({"bin_width_fraction_of_period": fraction,
                      "smearing_warning_above_fraction": SMEARING_FRACTION,
                      "amplitude_kept_fundamental": float(np.sinc(fraction)),
                      f"amplitude_kept_harmonic_{HIGHEST_HARMONIC}":
                          float(np.sinc(HIGHEST_HARMONIC * fraction))})
    return entry


def time_bin_warnings(events: EventList, model: TimingModel) -> list[str]:
    """A warning when the time bins smear the pulse (wider than SMEARING_FRACTION
    of the spin period)."""
    width_s = events.time_bin_s or 0.0
    fraction = width_s * model.spin.frequency.value
    if fraction <= SMEARING_FRACTION:
        return []
    return [f"the events' time bins (TIMEDEL = {width_s:.6g} s) are {100 * fraction:.3g}% of the "
            f"spin period (warning above {100 * SMEARING_FRACTION:g}%): the folded profile is the "
            "true one convolved with a box of that width (harmonic k multiplied by "
            f"sinc(k x TIMEDEL x frequency): the fundamental by {np.sinc(fraction):.3f}), so "
            "features narrower than the bin are smoothed out and the periodicity statistics "
            "lowered"]


def clock_state(inputs: EventInputs) -> str:
    """What is known of the clock behind the event times (for the report)."""
    events, observer = inputs.events, inputs.observer
    if observer.kind == "earth":
        used = [f"{c.converts} ({c.path})" for c in observer.clocks
                if c.applies_to(observer.site.name)]
        return "; ".join(used) if used else "no observatory clock corrections applied"
    if events.clock_applied is True:
        return "CLOCKAPP = T: the file says the mission's clock correction is applied"
    if events.clock_applied is False:
        return "CLOCKAPP = F: the mission's clock correction is NOT applied"
    return "unknown (no CLOCKAPP keyword): clock corrections as supplied by the file"


def time_selected(inputs: EventInputs, want_frequency=False) -> tuple[EventClock, EventTiming]:
    """Event clock and timing of the selected events."""
    clock = event_clock(inputs.events, inputs.index, inputs.observer)
    inputs.warnings.extend(w for w in clock.notes if w not in inputs.warnings)
    trajectory = inputs.observer.trajectory
    if trajectory is not None and len(clock):
        first, last = _span(clock, clock.seconds)
        inputs.warnings.extend(w for w in trajectory.gap_warnings(first, last)
                               if w not in inputs.warnings)
    span = valid_span(clock, inputs.observer)
    if span is not None:
        outside = np.flatnonzero((clock.seconds < span[0]) | (clock.seconds > span[1]))
        if len(outside):
            part = clock.select(outside)
            inputs.observer.trajectory.check_covers(part.at(part.seconds, part.seconds_lo))
    timing = time_events(clock, inputs.model, inputs.observer, inputs.ephemeris,
                         inputs.reference, want_frequency=want_frequency)
    inputs.warnings.extend(w for w in timing.accuracy.get("warnings", [])
                           if w not in inputs.warnings)
    return clock, timing


def barycentric_mjd(clock: EventClock, timing: EventTiming) -> np.ndarray:
    """Float MJD (TDB at the barycentre; ~1 µs resolution) of each event."""
    seconds = clock.seconds + timing.bary_offset_s
    if clock.seconds_lo is not None:
        seconds = seconds + clock.seconds_lo
    return clock.reference_day + (clock.reference_frac[0] + clock.reference_frac[1]
                                  + seconds / SECONDS_PER_DAY)


def settings_entry(inputs: EventInputs, timing: EventTiming) -> dict:
    accuracy = {k: v for k, v in timing.accuracy.items() if k != "warnings"}
    observer = inputs.observer.summary()
    if inputs.obsgeo_check is not None:
        observer["obsgeo_check"] = inputs.obsgeo_check
    return {"observer": observer, "ephemeris": inputs.ephemeris.label,
            "clock": clock_state(inputs), "barycentring": accuracy,
            "shapiro_delay_bodies": ["sun", *shapiro_planets(
                inputs.model.settings["shapiro_delay_planets"], inputs.ephemeris,
                inputs.model.path)],
            "shapiro_delay_masses": PLANET_MASSES_SOURCE,
            "time_keywords": inputs.events.keywords,
            "time_bins": time_bin_entry(inputs.events, inputs.model), "model": inputs.model.path,
            "phase_zero": ("model [phase_zero]" if inputs.model.phase_zero is not None else
                           "spin epoch at the barycentre")}


def _span(clock: EventClock, seconds: np.ndarray) -> list[float]:
    """[first, last] as float MJDs of clock seconds."""
    base = clock.reference_day + clock.reference_frac[0] + clock.reference_frac[1]
    return [base + float(np.min(seconds)) / SECONDS_PER_DAY,
            base + float(np.max(seconds)) / SECONDS_PER_DAY]


def fold_event_files(events_path, model_path, outdir, *, site=None, orbit=None, scale=None,
                     energy_range=None, energy_column=None, harmonics=20, bins=32,
                     sites_paths=(), ephemeris=None, clock_paths=(), make_plot=True) -> dict:
    """``timingkit events``: phases.fits, events_report.json and profile.png in
    ``outdir``; returns the report."""
    from timingkit.events.folding import fold_summary, smooth_profile
    if not 1 <= harmonics <= 40:
        raise InputError(f"the number of harmonics must lie in 1..40, found {harmonics}",
                         field="harmonics")
    if not 2 <= bins <= 4096:
        raise InputError(f"the number of bins must lie in 2..4096, found {bins}", field="bins")
    refuse_if_locked(outdir)                 # a busy folder: refused before the work
    inputs = load_event_inputs(events_path, model_path, site=site, orbit=orbit, scale=scale,
                               energy_range=energy_range, energy_column=energy_column,
                               sites_paths=sites_paths, ephemeris=ephemeris,
                               clock_paths=clock_paths)
    clock, timing = time_selected(inputs)
    fold, sums = fold_summary(timing.phase, harmonics, bins)
    cautions = fold.pop("cautions")
    n = len(inputs.index)
    report = {"source": inputs.model.name, "events_file": os.fspath(events_path),
              "events": n, "selection": inputs.selection,
              "span_mjd": _span(clock, clock.seconds), "span_mjd_scale": clock.scale,
              "barycentric_span_mjd": _span(clock, clock.seconds + timing.bary_offset_s),
              **fold,
              "settings": settings_entry(inputs, timing), "cautions": cautions,
              "warnings": inputs.warnings + inputs.events.notes}
    from timingkit.outputs.output_set import output_set
    from timingkit.outputs.report import write_json
    read = [events_path, model_path, *sites_paths, *clock_paths, ephemeris,
            orbit if isinstance(orbit, (str, os.PathLike)) else None]
    with output_set(outdir, inputs=read) as work:      # one set, never over an input
        _write_phases(inputs, clock, timing, os.path.join(work, "phases.fits"))
        write_json(os.path.join(work, "events_report.json"), report)
        if make_plot:
            from timingkit.outputs.profile_figure import plot_event_profile
            phase, smooth = smooth_profile(fold, sums, n)
            plot_event_profile(report, phase, smooth, path=os.path.join(work, "profile.png"))
    return report


def _write_phases(inputs: EventInputs, clock: EventClock, timing: EventTiming, path) -> None:
    from timingkit.formats.event_fits import write_event_table
    from timingkit.outputs.residual_table import atomic_output
    events = inputs.events
    # barycentric seconds from MJDREF (read as a TDB date): the TIME column's own
    # resolution; TIMEZERO is included
    shift = (clock.reference_day - events.mjdref[0]) * SECONDS_PER_DAY + \
        (clock.reference_frac[0] - events.mjdref[1]) * SECONDS_PER_DAY + \
        clock.reference_frac[1] * SECONDS_PER_DAY
    bary = clock.seconds + (timing.bary_offset_s + shift)
    if clock.seconds_lo is not None:
        bary += clock.seconds_lo
    cards = [("HISTORY", f"timingkit events: PHASE from model {inputs.model.path}", ""),
             ("HISTORY", "BARY_TIME: TDB seconds at the solar-system barycentre from "
                         "MJDREFI+MJDREFF read as a TDB date (TIMEZERO included)", ""),
             ("HISTORY", f"observer: {inputs.observer.label}; ephemeris: "
                         f"{inputs.ephemeris.label}", "")]
    if events.time_bin_s:
        cards.append(("HISTORY", "BARY_TIME: of the centre of each time bin, TIME + (0.5 - "
                                 "TIMEPIXR) x TIMEDEL", ""))
    if events.kind == "text":
        cards = [("MJDREFI", int(events.mjdref[0]), "reference of BARY_TIME (TDB)"),
                 ("MJDREFF", 0.0, "")] + cards
    with atomic_output(path, binary=True) as handle:
        write_event_table(handle, events, inputs.index,
                          [("PHASE", timing.phase, ""), ("BARY_TIME", bary, "s")], cards)


def event_toa_files(events_path, model_path, toas_path, *, template="auto", span_days=1.0,
                    site=None, orbit=None, scale=None, energy_range=None, energy_column=None,
                    min_events=20, save_template=None, sites_paths=(), ephemeris=None,
                    clock_paths=()) -> dict:
    """``timingkit event-toas``: one TOA per chunk of ``span_days``, written as a
    TOA table at the barycentre; returns facts for the terminal."""
    from timingkit.events.photon_toas import event_toas
    from timingkit.events.template import PulseTemplate
    from timingkit.formats.toa_writer import write_toa_table
    if not span_days > 0:
        raise InputError(f"the chunk span must be > 0 days, found {span_days}", field="span_days")
    if not min_events >= 2:
        raise InputError(f"each chunk needs at least 2 events, found {min_events}",
                         field="min_events")
    read = [events_path, model_path, orbit, None if template == "auto" else template,
            *sites_paths, *clock_paths, ephemeris]
    _refuse_outputs_over_inputs([toas_path, save_template], read)
    refuse_if_locked(toas_path, field="output")
    inputs = load_event_inputs(events_path, model_path, site=site, orbit=orbit, scale=scale,
                               energy_range=energy_range, energy_column=energy_column,
                               sites_paths=sites_paths, ephemeris=ephemeris,
                               clock_paths=clock_paths)
    _refuse_outputs_over_inputs([toas_path, save_template],      # and the files it names
                                [*read, *input_paths(None, inputs.model)])
    shape = None if template == "auto" else PulseTemplate.from_file(template)
    clock, timing = time_selected(inputs)
    if shape is None:
        shape = PulseTemplate.from_events(timing.phase)
    toas, facts, _ = event_toas(timing.phase, barycentric_mjd(clock, timing), span_days, shape,
                                inputs.model, inputs.reference, inputs.ephemeris,
                                min_events=min_events)
    with lock_output(toas_path, field="output"):
        if save_template is not None:
            shape.write(save_template)
        write_toa_table(toas, toas_path)
    facts.update(toas=len(toas), events=len(inputs.index),
                 warnings=inputs.warnings + facts.pop("warnings"),
                 observer=inputs.observer.label, clock=clock_state(inputs),
                 median_err_us=float(np.median(toas.err_us)))
    return facts


def simulation_observer(site_name, orbit_path, sites: SiteTable) -> tuple[Observer, str]:
    """Observer of a simulated list and its TIMEREF."""
    from timingkit.formats.orbit_table import read_orbit_table
    from timingkit.geometry.spacecraft import SpacecraftTrajectory
    if site_name is not None and orbit_path is not None:
        raise InputError("give a site or an orbit, not both", field="orbit")
    if orbit_path is not None:
        trajectory = SpacecraftTrajectory(read_orbit_table(orbit_path))
        return Observer("spacecraft", "tt", trajectory=trajectory, sites=sites), "local"
    site = sites.lookup(site_name or "geocentre")
    if site.kind == "ssb":
        return Observer("ssb", "tdb", sites=sites), "solarsystem"
    if site.kind == "geocentre":
        return Observer("geocentre", "tt", sites=sites), "geocentric"
    return Observer("earth", "utc", site=site, sites=sites), "local"


def simulate_event_file(model_path, output, *, start_mjd, end_mjd, rate_per_s, pulsed_fraction,
                        profile=("gauss:0.0:0.1",), site=None, orbit=None, seed=None,
                        sites_paths=(), ephemeris=None, clock_paths=()) -> dict:
    """``timingkit simulate-events``: an OGIP FITS event list (README)."""
    from timingkit.events.simulate import simulate_events
    from timingkit.events.template import PulseTemplate
    from timingkit.formats.event_fits import write_simulated_events
    from timingkit.formats.ogip_time import time_keyword_cards
    from timingkit.outputs.residual_table import atomic_output
    refuse_if_locked(output, field="output")
    model = load_model(model_path)
    _refuse_outputs_over_inputs([output], [*input_paths(None, model, sites_paths, ephemeris,
                                                        clock_paths), orbit, *profile])
    sites, eph, clocks = load_context(model, sites_paths, ephemeris, clock_paths)
    observer, timeref = simulation_observer(site, orbit, sites)
    observer.clocks = list(clocks)
    template = PulseTemplate.from_profile_spec(profile)
    if observer.kind == "spacecraft":
        ends = np.array([start_mjd, end_mjd])
        observer.trajectory.check_covers(SplitTime(np.floor(ends), ends - np.floor(ends), "tt"))
    sim = simulate_events(model, observer, eph, start_mjd, end_mjd, rate_per_s, pulsed_fraction,
                          template, reference_observations(model, sites, eph, clocks), seed)
    cards = [("OBJECT", model.name, "simulated source"),
             ("TELESCOP", "TIMINGKIT-SIM", "simulated by timingkit simulate-events"),
             ("CLOCKAPP", True, "simulated times: no clock error"),
             ("HISTORY", f"simulated: rate {rate_per_s} /s, pulsed fraction {pulsed_fraction}, "
                         f"profile {template.source}, seed {seed}, model {model_path}", "")]
    if observer.kind == "earth":
        xyz = observer.site.geocentric_itrf_m
        cards += [("OBSERVAT", observer.site.name, "site of the simulated array"),
                  ("OBSGEO-X", float(xyz[0]), "[m] geocentric ITRS"),
                  ("OBSGEO-Y", float(xyz[1]), "[m] geocentric ITRS"),
                  ("OBSGEO-Z", float(xyz[2]), "[m] geocentric ITRS")]
    with lock_output(output, field="output"), atomic_output(output, binary=True) as handle:
        write_simulated_events(handle, sim.seconds, [("ENERGY", sim.energy_kev, "keV")],
                               time_keyword_cards(sim.reference_day, 0.0, sim.scale, timeref),
                               sim.gti_s, cards)
    return {"events": len(sim.seconds), "pulsed": int(sim.pulsed.sum()),
            "observer": observer.label, "time_scale": sim.scale.upper(),
            "timeref": timeref.upper()}


def _refuse_outputs_over_inputs(outputs, inputs) -> None:
    """An InputError when an output file is one of the inputs (inputs are never
    changed) or two outputs are one file."""
    from timingkit.formats.atomic_file import refuse_output_over_inputs
    outputs = [path for path in outputs if path is not None]
    for i, path in enumerate(outputs):
        refuse_output_over_inputs(path, [*inputs, *outputs[:i]])
