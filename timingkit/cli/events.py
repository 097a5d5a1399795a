"""``timingkit events``, ``event-toas`` and ``simulate-events``: photon event lists
from X-ray and gamma-ray observers."""

from __future__ import annotations

from timingkit.cli.options import add_context_options, add_wait_option, comma_list


DEFAULT_PROFILE = ["gauss:0.0:0.1"]


def _observer_options(p) -> None:
    group = p.add_mutually_exclusive_group()
    group.add_argument("--site", metavar="NAME",
                       help="ground site of the events (a site-file name, geocentre or ssb)")
    group.add_argument("--orbit", metavar="FILE",
                       help="spacecraft orbit table (text or FITS, geocentric GCRS metres)")


def _event_input_options(p) -> None:
    p.add_argument("events", help="event list: OGIP FITS, or text with an mjd column")
    p.add_argument("model", help="timing model (TOML)")
    _observer_options(p)
    p.add_argument("--scale", choices=["utc", "tt", "tdb"],
                   help="time scale of a text event list (replaces its '# scale:' comment)")
    p.add_argument("--energy-range", nargs=2, type=float, metavar=("LO", "HI"),
                   help="keep events with LO <= energy < HI (units of the energy column)")
    p.add_argument("--energy-column", metavar="NAME",
                   help="column for --energy-range (default: ENERGY, PI, PHA or CHANNEL)")
    add_context_options(p)


def add_parsers(sub) -> None:
    p = sub.add_parser("events", help="barycentre and fold photon events; periodicity tests")
    _event_input_options(p)
    p.add_argument("--harmonics", type=int, default=20, metavar="M",
                   help="report Z^2 for 1..M harmonics (default 20; the H-test always tries "
                        "1..20)")
    p.add_argument("--bins", type=int, default=32, metavar="B",
                   help="phase bins of the profile (default 32)")
    p.add_argument("-o", "--outdir", default=None,
                   help="output folder (default: SOURCE-events, after the model's name)")
    p.add_argument("--no-plot", action="store_true", help="skip profile.png")
    add_wait_option(p)
    p.set_defaults(func=cmd_events)

    p = sub.add_parser("event-toas", help="TOAs from photon events (unbinned likelihood)")
    _event_input_options(p)
    p.add_argument("--template", required=True, metavar="FILE|auto",
                   help="pulse template file (.npz or FITS, as for profile-toas), or 'auto' to fit "
                        "one to the folded events")
    p.add_argument("--span-days", type=float, required=True, metavar="D",
                   help="one TOA per D days of events")
    p.add_argument("--min-events", type=int, default=20, metavar="N",
                   help="skip chunks with fewer events (default 20)")
    p.add_argument("--save-template", metavar="FILE",
                   help="write the template used (template file; .fits: as FITS, else .npz)")
    p.add_argument("-o", "--output", required=True, metavar="TOAS", help="TOA table to write")
    add_wait_option(p, "the TOA table")
    p.set_defaults(func=cmd_event_toas)

    p = sub.add_parser("simulate-events", help="simulate a photon event list (OGIP FITS)")
    p.add_argument("model", help="timing model (TOML)")
    p.add_argument("--start", type=float, required=True, metavar="MJD",
                   help="first event time (on the list's scale: UTC at a site, TT at the "
                        "geocentre or on a spacecraft, TDB at ssb)")
    p.add_argument("--end", type=float, required=True, metavar="MJD",
                   help="last event time (same scale)")
    p.add_argument("--rate-per-s", type=float, required=True, metavar="R",
                   help="mean event rate (pulsed and unpulsed), per second")
    p.add_argument("--pulsed-fraction", type=float, required=True, metavar="P",
                   help="share of the events that are pulsed (0 to 1)")
    p.add_argument("--profile", action="extend", type=comma_list, default=None,
                   metavar="SHAPE[,SHAPE...]",
                   help="pulse shape: wrapped Gaussian components gauss:CENTRE:FWHM[:AMP] "
                        "(phase units; several as a comma list and/or repeated, e.g. "
                        "--profile gauss:0.1:0.05,gauss:0.6:0.2) or one template file "
                        "(default gauss:0.0:0.1)")
    _observer_options(p)
    p.add_argument("--seed", type=int, default=None,
                   help="random seed (the same seed gives the same events)")
    add_context_options(p)
    p.add_argument("-o", "--output", required=True, metavar="EVENTS.fits",
                   help="event list to write (OGIP FITS)")
    add_wait_option(p, "the event list")
    p.set_defaults(func=cmd_simulate_events)


def _common(args) -> dict:
    return dict(site=args.site, orbit=args.orbit, scale=args.scale,
                energy_range=args.energy_range, energy_column=args.energy_column,
                sites_paths=args.sites, ephemeris=args.ephemeris, clock_paths=args.clock)


def _fap_text(entry: dict) -> str:
    if entry["false_alarm_probability_upper_limit"]:
        return f"false-alarm probability < {entry['false_alarm_probability']:.0e}"
    return (f"false-alarm probability {entry['false_alarm_probability']:.2g}; "
            f"{entry['false_alarm_probability_accuracy']}")


def cmd_events(args) -> int:
    from timingkit.outputs.numbers import format_value
    from timingkit.pipeline.event_run import fold_event_files
    from timingkit.cli.fit import default_outdir
    default_outdir(args, "events", args.events)
    report = fold_event_files(args.events, args.model, args.outdir, harmonics=args.harmonics,
                              bins=args.bins, make_plot=not args.no_plot, **_common(args))
    h, pf, peak = report["h_test"], report["pulsed_fraction"], report["peak_phase"]
    accuracy = report["settings"]["barycentring"]
    print(f"{report['source']}: {report['events']:,} events, MJD {report['span_mjd'][0]:.5f} to "
          f"{report['span_mjd'][1]:.5f} ({report['span_mjd_scale'].upper()}), observer "
          f"{report['settings']['observer']['observer']}")
    print(f"  H-test {h['value']:.2f} ({h['harmonics']} harmonic"
          f"{'s' if h['harmonics'] > 1 else ''}): {_fap_text(h)}")
    z2 = report["z2"][min(1, len(report["z2"]) - 1)]
    print(f"  Z^2_{z2['harmonics']} = {z2['value']:.2f}: {_fap_text(z2)}")
    print(f"  pulsed fraction {format_value(pf['value'], pf['uncertainty'])}; peak phase "
          f"{format_value(peak['value'], peak['uncertainty'])}")
    measured = "" if accuracy.get("grid_step_s") is None else \
        (f" every {accuracy['grid_step_s']:g} s (largest measured interpolation error "
         f"{accuracy['max_interpolation_error_ns']:.2g} ns)")
    print(f"  barycentring: {accuracy['method']}{measured}")
    print(f"  ephemeris: {report['settings']['ephemeris']}; clock: {report['settings']['clock']}")
    for line in report["cautions"]:
        print(f"  caution: {line}")
    for line in report["warnings"]:
        print(f"  warning: {line}")
    plot = "" if args.no_plot else ", profile.png"
    print(f"wrote {args.outdir}/: phases.fits, events_report.json{plot}")
    return 0


def cmd_event_toas(args) -> int:
    from timingkit.pipeline.event_run import event_toa_files
    facts = event_toa_files(args.events, args.model, args.output, template=args.template,
                            span_days=args.span_days, min_events=args.min_events,
                            save_template=args.save_template, **_common(args))
    print(f"{facts['toas']} TOAs from {facts['events']:,} events ({facts['span_days']} days "
          f"per TOA; median uncertainty {facts['median_err_us']:.3g} µs); observer "
          f"{facts['observer']}")
    print(f"  template: {facts['template']} (its share of the events: "
          f"{facts['template_weight']:.2f})")
    for chunk in facts["skipped_chunks"]:
        print(f"  skipped the chunk from MJD {chunk['start_mjd']:.4f} ({chunk['events']} events): "
              f"{chunk['reason']}")
    print(f"  clock: {facts['clock']}")
    for line in facts["warnings"]:
        print(f"  warning: {line}")
    print(f"wrote {args.output} (site ssb, TDB): fit it with 'timingkit fit {args.output} "
          f"{args.model}'")
    return 0


def cmd_simulate_events(args) -> int:
    from timingkit.pipeline.event_run import simulate_event_file
    facts = simulate_event_file(args.model, args.output, start_mjd=args.start, end_mjd=args.end,
                                rate_per_s=args.rate_per_s, pulsed_fraction=args.pulsed_fraction,
                                profile=args.profile or DEFAULT_PROFILE, site=args.site,
                                orbit=args.orbit, seed=args.seed, sites_paths=args.sites,
                                ephemeris=args.ephemeris, clock_paths=args.clock)
    print(f"wrote {facts['events']:,} events ({facts['pulsed']:,} pulsed) to {args.output}; "
          f"observer {facts['observer']}, TIMESYS {facts['time_scale']}, TIMEREF "
          f"{facts['timeref']}")
    return 0
