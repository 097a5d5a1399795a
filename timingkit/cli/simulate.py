"""``timingkit simulate``: TOAs that a model predicts, with chosen noise."""

from __future__ import annotations

from timingkit.cli.options import (add_sites_and_ephemeris_options, add_wait_option, number_list,
                                   writing_output_file)
from timingkit.formats.errors import InputError, excerpt


def add_parsers(sub) -> None:
    p = sub.add_parser("simulate", help="simulate TOAs that a model predicts")
    p.add_argument("model", help="timing model (TOML)")
    p.add_argument("--start", type=float, required=True, metavar="MJD",
                   help="first TOA's day (UTC at the site)")
    p.add_argument("--end", type=float, required=True, metavar="MJD",
                   help="last TOA's day (UTC at the site)")
    p.add_argument("--count", type=int, required=True, metavar="N", help="number of TOAs")
    p.add_argument("--error-us", type=float, required=True, metavar="E",
                   help="stated 1-sigma error of every TOA, µs")
    p.add_argument("--site", action="append", required=True, metavar="S",
                   help="site name; repeat to alternate sites")
    p.add_argument("--freq-mhz", action="extend", type=number_list(float), default=None,
                   metavar="F[,F...]", help="observing frequencies to cycle through, MHz: a "
                                            "comma list and/or repeated (default 1400)")
    p.add_argument("--seed", type=int, default=None,
                   help="random seed (the same seed gives the same TOAs)")
    add_sites_and_ephemeris_options(p)
    p.add_argument("--flag", action="append", default=[], metavar="NAME=V1,V2",
                   help="add a flag column cycling through values, e.g. backend=wide-a,wide-b")
    p.add_argument("--no-noise", action="store_true", help="exact TOAs, no added noise")
    p.add_argument("--error-scale", type=float, default=None, metavar="S",
                   help="draw the white noise with S times the stated TOA error (all TOAs; "
                        "replaces the model's [[white_noise]] groups)")
    p.add_argument("--added-error-us", type=float, default=None, metavar="Q",
                   help="white noise added in quadrature to the stated error, µs (all TOAs)")
    p.add_argument("--red-amplitude-log10", type=float, default=None, metavar="A",
                   help="inject power-law red noise with this log10 amplitude (replaces the "
                        "model's [red_noise]); needs --red-spectral-index")
    p.add_argument("--red-spectral-index", type=float, default=None, metavar="GAMMA",
                   help="spectral index of the injected red noise (power ~ f^-GAMMA)")
    p.add_argument("--red-frequencies", type=int, default=30, metavar="N",
                   help="Fourier frequencies of the injected red noise (default 30)")
    p.add_argument("--red-corner-per-yr", type=float, default=0.0, metavar="F",
                   help="corner frequency of the injected red noise, 1/yr (default 0: none)")
    p.add_argument("--solar-wind-density-cm3", type=float, default=None, metavar="N0",
                   help="inject a solar wind of this electron density at 1 au, cm^-3 (replaces "
                        "the model's [solar_wind]; 0 = none)")
    p.add_argument("-o", "--output", required=True, metavar="TOAS", help="TOA table to write")
    add_wait_option(p, "the TOA table")
    p.set_defaults(func=cmd_simulate)


def cmd_simulate(args) -> int:
    from timingkit.pipeline.inputs import (input_paths, load_context, load_model,
                                           reference_observations)
    from timingkit.model.simulate import simulate_toas
    from timingkit.formats.toa_writer import write_toa_table
    from timingkit.formats.atomic_file import refuse_output_over_inputs
    from timingkit.formats.toa_reader import MAX_FIELD_CHARS
    from timingkit.outputs.folder_lock import refuse_if_locked
    model = load_model(args.model)
    if args.solar_wind_density_cm3 is not None:
        from timingkit.model.solar_wind import set_solar_wind
        set_solar_wind(model, args.solar_wind_density_cm3, field="--solar-wind-density-cm3")
    sites, eph, clocks = load_context(model, args.sites, args.ephemeris)
    flags = {}
    for item in args.flag:
        name, sep, values = item.partition("=")
        if not sep or not name or not values:
            raise InputError(f"expected NAME=V1,V2, found {excerpt(item)}", field="--flag",
                             quoted=(item,))
        flags[name] = values.split(",")
        longest = max([name, *flags[name]], key=lambda text: len(text.encode("utf-8")))
        if len(longest.encode("utf-8")) > MAX_FIELD_CHARS:     # the table could not be read
            raise InputError(f"a flag name or value of {len(longest.encode('utf-8'))} bytes "
                             f"({excerpt(longest)}); TOA tables take at most "
                             f"{MAX_FIELD_CHARS}", field="--flag", quoted=(longest,))
    noise = _simulated_noise(model, args)
    refuse_output_over_inputs(args.output, input_paths(None, model, args.sites, args.ephemeris))
    refuse_if_locked(args.output, field="--output")
    toas = simulate_toas(model, args.start, args.end, args.count, args.error_us, sites, eph,
                         site_names=args.site, freqs_mhz=args.freq_mhz or [1400.0], seed=args.seed,
                         clocks=clocks, flags=flags, add_noise=not args.no_noise,
                         reference=reference_observations(model, sites, eph, clocks),
                         noise=noise)
    with writing_output_file(args.output):
        write_toa_table(toas, args.output)
    print(f"wrote {len(toas)} TOAs to {args.output}")
    if len(toas) < args.count:
        print(f"left out {args.count - len(toas)} requested TOAs whose line of sight crosses the "
              "solar disc")
    return 0


def _simulated_noise(model, args):
    """The model's noise sections, with the white and/or red part replaced by
    the command-line options when given."""
    from timingkit.model.noise import NoiseModel
    noise = NoiseModel.from_timing_model(model)
    if args.error_scale is not None or args.added_error_us is not None:
        noise.white = NoiseModel.from_values(
            error_scale=1.0 if args.error_scale is None else args.error_scale,
            added_error_us=0.0 if args.added_error_us is None else args.added_error_us).white
    if args.red_amplitude_log10 is not None or args.red_spectral_index is not None:
        if args.red_amplitude_log10 is None or args.red_spectral_index is None:
            raise InputError("give both --red-amplitude-log10 and --red-spectral-index",
                             field="--red-amplitude-log10")
        noise.red = NoiseModel.from_values(
            amplitude_log10=args.red_amplitude_log10, spectral_index=args.red_spectral_index,
            frequencies=args.red_frequencies, corner_frequency_per_yr=args.red_corner_per_yr).red
    return noise
