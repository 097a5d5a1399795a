"""``timingkit profile-toas`` (TOAs from folded profiles) and
``timingkit simulate-profiles`` (test and demo profiles)."""

from __future__ import annotations

import os
import sys

from timingkit.cli.options import add_sites_and_ephemeris_options, add_wait_option, number_list
from timingkit.formats.errors import InputError


def add_parsers(sub) -> None:
    p = sub.add_parser("profile-toas", help="TOAs from folded profiles (phase-gradient fit "
                                            "against a template)")
    p.add_argument("profiles", nargs="+", help="profile files (.npz, one observation each, or "
                                               "FITS, one or more)")
    p.add_argument("--template", required=True, metavar="FILE|auto",
                   help="template file (.npz or FITS), or 'auto' to build one from the profiles")
    p.add_argument("--write-template", metavar="FILE",
                   help="where --template auto writes its template (.fits: as FITS; "
                        "default: TOAS with .template.npz)")
    p.add_argument("--per-channel", action="store_true", help="one TOA per channel")
    p.add_argument("--per-subint", action="store_true", help="one TOA per sub-integration")
    p.add_argument("--min-snr", type=float, default=8.0, metavar="S",
                   help="no TOA from a profile below this S/N (default 8)")
    p.add_argument("--flag", action="append", default=[], metavar="NAME=VALUE",
                   help="a flag put on every TOA (repeatable), e.g. --flag backend=wide-b so "
                        "the model's [[time_offset]] groups take them")
    p.add_argument("-o", "--output", required=True, metavar="TOAS", help="TOA table to write")
    add_wait_option(p, "the TOA table")
    p.set_defaults(func=cmd_profile_toas)

    s = sub.add_parser("simulate-profiles", help="simulate folded profiles of a model, folded "
                                                 "with a deliberately imperfect predictor")
    s.add_argument("model", help="the true timing model (TOML)")
    s.add_argument("--folding-model", metavar="FILE",
                   help="model the folding predictors are made from (default: MODEL with "
                        "the offsets below)")
    s.add_argument("--folding-frequency-offset-hz", type=float, default=None, metavar="DF",
                   help="spin-frequency error of the folding model (default: 0.05 cycles "
                        "over the span)")
    s.add_argument("--folding-dm-offset", type=float, default=None, metavar="DDM",
                   help="DM error of the folding model, pc cm^-3 (default 0)")
    s.add_argument("--site", required=True, metavar="NAME", help="observing site")
    s.add_argument("--start", type=float, required=True, metavar="MJD",
                   help="first observation (UTC at the site)")
    s.add_argument("--end", type=float, required=True, metavar="MJD",
                   help="last observation (UTC at the site)")
    s.add_argument("--count", type=int, required=True, metavar="N", help="observations")
    s.add_argument("--freq-mhz", action="extend", type=number_list(float), default=None,
                   metavar="F[,F...]", help="centre frequencies, MHz, used in turn: a comma "
                                            "list and/or repeated (default 1400)")
    for option, kind, default, metavar, what in (
            ("--channels", int, 1, "C", "frequency channels per observation"),
            ("--bandwidth-mhz", float, 100.0, "B", "bandwidth the channels span, MHz"),
            ("--subints", int, 1, "S", "sub-integrations per observation"),
            ("--duration-s", float, 600.0, "T", "length of each observation, s"),
            ("--bins", int, 1024, "N", "phase bins per profile"),
            ("--snr", float, 100.0, "S", "S/N of each whole observation")):
        s.add_argument(option, type=kind, default=default, metavar=metavar,
                       help=f"{what} (default {default:g})")
    s.add_argument("--template", metavar="FILE", help="template (default: built-in, invented)")
    s.add_argument("--seed", type=int, default=None,
                   help="random seed (the same seed gives the same profiles)")
    add_sites_and_ephemeris_options(s)
    s.add_argument("--profile-format", choices=("npz", "fits"), default="npz",
                   help="file format of the profiles and template written (default npz)")
    s.add_argument("-o", "--outdir", required=True, metavar="DIR",
                   help="output folder (obs-N files and the template; written as one set)")
    add_wait_option(s)
    s.set_defaults(func=cmd_simulate_profiles)


def cmd_profile_toas(args) -> int:
    from timingkit.formats.profile_file import (read_profile_sets, read_template_file,
                                                write_template_file)
    from timingkit.formats.toa_writer import write_toa_table
    from timingkit.profiles.templates import auto_template, resample
    from timingkit.profiles.toas import gather_profiles, time_profiles
    from timingkit.formats.atomic_file import refuse_output_over_inputs
    from timingkit.outputs.folder_lock import lock_output, refuse_if_locked
    refuse_output_over_inputs(args.output, [*args.profiles, args.template, args.write_template])
    template_path = None
    if args.template == "auto":
        template_path = args.write_template or os.path.splitext(args.output)[0] + ".template.npz"
        refuse_output_over_inputs(template_path, [*args.profiles, args.output])
    elif args.write_template:
        raise InputError("--write-template writes the template --template auto builds; with a "
                         "template file there is none to write", field="--write-template")
    refuse_if_locked(args.output, field="--output")
    from timingkit.cli.options import parse_flag_options
    flags = parse_flag_options(args.flag)
    sets = [ps for path in args.profiles for ps in read_profile_sets(path)]
    timed = gather_profiles(sets, args.per_channel, args.per_subint)
    bins = timed.profiles.shape[1]
    if args.template == "auto":
        template = auto_template(list(timed.profiles), bins)
    else:
        template = read_template_file(args.template)
    result = time_profiles(timed, resample(template.profile, bins), args.min_snr, flags)
    with lock_output(args.output, field="--output"):
        if template_path:
            write_template_file(template, template_path)
        write_toa_table(result.toas, args.output)
    for line in result.skipped:
        print(f"skipped {line}", file=sys.stderr)
    made = f"; template ({len(template.components)} components) written to {template_path}" \
        if template_path else ""
    print(f"wrote {len(result.toas)} TOAs from {len(timed.profiles)} profiles of "
          f"{len(sets)} observations in {len(args.profiles)} files to {args.output}{made}")
    return 0


def cmd_simulate_profiles(args) -> int:
    from timingkit.formats.profile_file import (read_template_file, write_profile_file,
                                                write_template_file)
    from timingkit.outputs.output_set import check_before_writing, output_set
    from timingkit.pipeline.inputs import (input_paths, load_context, load_model,
                                           reference_observations)
    from timingkit.predict.model_phase import PhaseContext
    from timingkit.profiles.simulate import ProfileSimulation, simulate_profiles
    from timingkit.profiles.templates import builtin_template, resample
    from timingkit.formats.profile_file import Template
    _check_folding_options(args)
    true = load_model(args.model)
    # one set, never over an input: checked before the work, written after it
    inputs = [*input_paths(None, true, args.sites, args.ephemeris), args.folding_model,
              args.template]
    check_before_writing(args.outdir, inputs)
    sites, eph, clocks = load_context(true, args.sites, args.ephemeris)
    context = PhaseContext(sites, eph, clocks, reference_observations(true, sites, eph, clocks))
    if args.folding_model:
        folding = load_model(args.folding_model)
    else:
        folding = true.copy()
        offset = args.folding_frequency_offset_hz
        if offset is None:
            offset = 0.05 / max((args.end - args.start) * 86400.0, 1.0)
        folding.parameter("spin.frequency_hz").add(offset)
        folding.parameter("dispersion.dm").add(args.folding_dm_offset or 0.0)
    if args.template:
        template = read_template_file(args.template)
        template = Template(resample(template.profile, args.bins), template.components)
    else:
        template = builtin_template(args.bins)
    sim = ProfileSimulation(site=args.site, start_mjd=args.start, end_mjd=args.end,
                            count=args.count, centre_freqs_mhz=tuple(args.freq_mhz or [1400.0]),
                            channels=args.channels, bandwidth_mhz=args.bandwidth_mhz,
                            subints=args.subints, duration_s=args.duration_s, bins=args.bins,
                            snr=args.snr, seed=args.seed)
    sets = simulate_profiles(true, folding, sim, context, template)
    width, suffix = len(str(len(sets))), args.profile_format
    with output_set(args.outdir, inputs, purpose="simulated profiles") as work:
        write_template_file(template, os.path.join(work, f"template.{suffix}"))
        for k, ps in enumerate(sets, start=1):
            write_profile_file(ps, os.path.join(work, f"obs-{k:0{width}d}.{suffix}"))
    print(f"wrote {len(sets)} profile files (.{suffix}, {args.subints} sub-integration(s) x "
          f"{args.channels} channel(s) x {args.bins} bins) and template.{suffix} to {args.outdir}")
    return 0


def _check_folding_options(args) -> None:
    """The offsets change MODEL into the folding model; a --folding-model is used as given."""
    for option, value in (("--folding-frequency-offset-hz", args.folding_frequency_offset_hz),
                          ("--folding-dm-offset", args.folding_dm_offset)):
        if args.folding_model and value is not None:
            raise InputError(f"{option} offsets MODEL to make the folding model; with "
                             "--folding-model that model is used as it is: give one or the "
                             "other", field=option)
