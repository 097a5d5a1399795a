"""``timingkit predict``: a phase predictor (Chebyshev segments) for folding."""

from __future__ import annotations

import sys

from timingkit.cli.options import add_context_options, add_wait_option, parse_flag_options
from timingkit.formats.errors import InputError


def add_parsers(sub) -> None:
    p = sub.add_parser("predict", help="phase predictor of a model at a site, for folding")
    p.add_argument("model", help="timing model (TOML); or, with --table alone, a predictor "
                                 "file (JSON) to summarise")
    p.add_argument("--site", metavar="NAME", help="observing site")
    p.add_argument("--start", metavar="MJD", help="first time covered (UTC at the site)")
    p.add_argument("--end", metavar="MJD", help="last time covered (UTC at the site)")
    p.add_argument("--windows", metavar="FILE",
                   help="cover only these observing windows (a text file of start and end "
                        "MJDs, one window per line; instead of --start/--end)")
    p.add_argument("--flag", action="append", default=[], metavar="NAME=VALUE",
                   help="a flag of the observation (repeatable), for the model's time-offset "
                        "groups, e.g. --flag backend=wide-b")
    p.add_argument("--freq-mhz", type=float, metavar="F",
                   help="observing frequency in MHz (inf: no dispersion)")
    p.add_argument("--segment-minutes", type=float, metavar="M",
                   help="segment length (default: chosen for the accuracy)")
    p.add_argument("--degree", type=int, metavar="K",
                   help="Chebyshev degree per segment (default: chosen for the accuracy)")
    p.add_argument("--accuracy-cycles", type=float, default=1e-9, metavar="A",
                   help="largest phase error allowed, cycles (default 1e-9)")
    add_context_options(p)
    p.add_argument("--table", action="store_true",
                   help="print one line per segment: apparent frequency and period, phase "
                        "at the start")
    p.add_argument("-o", "--output", metavar="JSON", help="predictor file to write")
    add_wait_option(p, "the predictor file")
    p.set_defaults(func=cmd_predict)


def _is_predictor_file(path: str) -> bool:
    from timingkit.formats.safe_read import open_regular
    try:
        with open_regular(path, "model or predictor file") as fh:
            head = fh.read(200)
    except (OSError, InputError):
        return False
    return b"timingkit-phase-predictor" in head


def cmd_predict(args) -> int:
    from timingkit.predict.predictor import read_predictor
    if args.table and not args.output and _is_predictor_file(args.model):
        print_table(read_predictor(args.model))
        return 0
    span = ("windows",) if args.windows else ("start", "end")
    if args.windows and (args.start or args.end):
        raise InputError("give either --windows or --start/--end, not both", field="--windows")
    missing = [f"--{name.replace('_', '-')}" for name in ("site", *span, "freq_mhz")
               if getattr(args, name) is None]
    if missing:
        raise InputError(f"building a predictor needs {', '.join(missing)}", field=missing[0])
    if not args.output and not args.table:
        raise InputError("give -o FILE to write the predictor (or --table to print it)",
                         field="--output")
    if args.output:
        from timingkit.formats.atomic_file import refuse_output_over_inputs
        from timingkit.outputs.folder_lock import refuse_if_locked
        from timingkit.pipeline.inputs import input_paths, load_model
        refuse_output_over_inputs(args.output, [args.model, args.windows])
        refuse_output_over_inputs(args.output, [    # nor a file the model names
            *input_paths(None, load_model(args.model), args.sites, args.ephemeris, args.clock)])
        refuse_if_locked(args.output, field="--output")
    predictor = build_from_files(args)
    data = predictor.data
    if args.output:
        from timingkit.formats.predictor_file import write_predictor_file
        from timingkit.outputs.folder_lock import lock_output
        with lock_output(args.output, field="--output"):
            write_predictor_file(data, args.output)
        print(f"wrote {len(predictor)} segments (degree {int(data.degrees.min())}-"
              f"{int(data.degrees.max())}) covering MJD {predictor.start_text} to "
              f"{predictor.end_text}{_in_windows(predictor)} at {data.site}, "
              f"{data.freq_mhz:g} MHz, to {args.output}; "
              f"estimated largest error {data.estimated_max_error_cycles:.2g} cycles")
    for offset in data.time_offsets_applied:
        print(f"applied time offset {offset['offset_s']:.9g} s of the group {offset['flag']} = "
              f"{offset['value']}")
    for warning in data.warnings:
        print(f"caution: {warning}", file=sys.stderr)
    if data.estimated_max_error_cycles > data.accuracy_cycles:
        print(f"warning: estimated error {data.estimated_max_error_cycles:.2g} cycles exceeds "
              f"the requested {data.accuracy_cycles:.2g}: use shorter segments or a higher "
              "degree (or leave them to be chosen)", file=sys.stderr)
    if args.table:
        print_table(predictor)
    return 0


def _in_windows(predictor) -> str:
    count = len(predictor.windows())
    return f" in {count} windows" if count > 1 else ""


def build_from_files(args):
    from timingkit.pipeline.inputs import load_context, load_model, reference_observations
    from timingkit.predict.build import build_predictor, build_window_predictor
    from timingkit.predict.model_phase import PhaseContext
    from timingkit.predict.time_offsets import check_observation_flags
    flags = parse_flag_options(args.flag)
    check_observation_flags(flags, field="--flag")
    windows = None
    if args.windows:
        from timingkit.formats.window_file import read_window_file
        windows = read_window_file(args.windows)
    model = load_model(args.model)
    sites, eph, clocks = load_context(model, args.sites, args.ephemeris, args.clock)
    context = PhaseContext(sites, eph, clocks, reference_observations(model, sites, eph, clocks))
    options = dict(segment_minutes=args.segment_minutes, degree=args.degree,
                   accuracy_cycles=args.accuracy_cycles, flags=flags)
    if windows is not None:
        return build_window_predictor(model, args.site, windows, args.freq_mhz, context,
                                      **options)
    return build_predictor(model, args.site, args.start, args.end, args.freq_mhz, context,
                           **options)


def print_table(predictor) -> None:
    d = predictor.data
    flags = "".join(f", {k} = {v}" for k, v in d.flags.items())
    print(f"phase predictor for {d.source or 'unnamed'} at {d.site}, {d.freq_mhz:g} MHz"
          f"{flags}; times UTC at the site")
    print(f"{'segment':>7}  {'start MJD':<22} {'minutes':>8} {'degree':>6}  "
          f"{'frequency (Hz)':>20}  {'period (s)':>20}  phase at start (cycles)")
    for row in predictor.segment_table():
        phase = f"{row['phase_integer']} + {row['phase_fraction']:.12f}"
        print(f"{row['segment']:>7}  {row['start_mjd']:<22} {row['minutes']:>8.2f} "
              f"{row['degree']:>6}  {row['frequency_hz']:>20.13f}  {row['period_s']:>20.17f}  "
              f"{phase}")
