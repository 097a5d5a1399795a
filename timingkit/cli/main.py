"""The ``timingkit`` command: argparse subcommands over timingkit.pipeline.fit_run.

Exit status: 0 success, 2 bad input (one message, no traceback unless
--debug), 1 internal failure (3 from ``batch`` when some sources failed).
"""

from __future__ import annotations

import argparse
import json
import os
import sys

from timingkit.formats.errors import FitError, InputError

DESCRIPTION = ("timingkit: pulsar timing from arrival times to a fitted timing model. "
               "Barycentre TOAs, fit spin, position, dispersion and orbit, inspect residuals, "
               "report derived physics.")


def _common_inputs(p: argparse.ArgumentParser) -> None:
    p.add_argument("toas", help="TOA table (plain text)")
    p.add_argument("model", help="timing model (TOML)")
    p.add_argument("--sites", action="append", default=[], metavar="FILE",
                   help="extra site file (TOML); may be repeated")
    p.add_argument("--ephemeris", metavar="BSP",
                   help="JPL SPK ephemeris file (default: the model's settings, else built-in DE421)")
    p.add_argument("--clock", action="append", default=[], metavar="FILE",
                   help="clock-correction table; may be repeated")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="timingkit", description=DESCRIPTION)
    parser.add_argument("--debug", action="store_true", help="show tracebacks")
    parser.add_argument("--version", action="version", version="timingkit 0.1.0")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    p = sub.add_parser("fit", help="fit a timing model to TOAs")
    _common_inputs(p)
    p.add_argument("-o", "--outdir", default="timingkit-fit", help="output folder")
    p.add_argument("--free", nargs="+", default=[], metavar="P", help="parameters to fit")
    p.add_argument("--fix", nargs="+", default=[], metavar="P", help="parameters to hold fixed")
    p.add_argument("--color-by", default="site", help="colour residuals by site, backend, freq")
    p.add_argument("--no-plot", action="store_true", help="skip residuals.png")
    p.add_argument("--suggest", action="store_true",
                   help="also try adding a frequency derivative, freeing fixed binary terms and "
                        "glitches at --glitch-candidate epochs; list those the data support "
                        "(F-test, delta AIC/BIC)")
    p.add_argument("--suggest-level", type=float, default=0.01, metavar="P",
                   help="F-test probability below which an addition is supported (default 0.01)")
    p.add_argument("--glitch-candidate", action="append", default=[], metavar="MJD",
                   help="with --suggest: also try a glitch at this epoch; may be repeated")
    p.set_defaults(func=cmd_fit)

    p = sub.add_parser("residuals", help="residuals of a model without fitting")
    _common_inputs(p)
    p.add_argument("-o", "--outdir", default="timingkit-residuals")
    p.add_argument("--color-by", default="site")
    p.set_defaults(func=cmd_residuals)

    p = sub.add_parser("barycenter", help="per-TOA time scales and delays as CSV")
    _common_inputs(p)
    p.add_argument("-o", "--output", metavar="CSV", help="output CSV (default: standard output)")
    p.set_defaults(func=cmd_barycenter)

    p = sub.add_parser("plot", help="plot residuals from a fit output folder")
    p.add_argument("outdir", help="folder written by 'fit' or 'residuals'")
    p.add_argument("--color-by", default="site")
    p.add_argument("-o", "--output", metavar="PNG", help="figure file (.png or .pdf)")
    p.set_defaults(func=cmd_plot)

    p = sub.add_parser("derive", help="derived physics of a timing model")
    p.add_argument("model", help="timing model (TOML)")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=cmd_derive)

    p = sub.add_parser("simulate", help="simulate TOAs that a model predicts")
    p.add_argument("model", help="timing model (TOML)")
    p.add_argument("--start", type=float, required=True, metavar="MJD")
    p.add_argument("--end", type=float, required=True, metavar="MJD")
    p.add_argument("--count", type=int, required=True, metavar="N")
    p.add_argument("--error-us", type=float, required=True, metavar="E")
    p.add_argument("--site", action="append", required=True, metavar="S",
                   help="site name; repeat to alternate sites")
    p.add_argument("--freq-mhz", type=float, nargs="+", default=[1400.0], metavar="F")
    p.add_argument("--seed", type=int, default=None)
    p.add_argument("--sites", action="append", default=[], metavar="FILE")
    p.add_argument("--ephemeris", metavar="BSP")
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
    p.add_argument("--red-spectral-index", type=float, default=None, metavar="GAMMA")
    p.add_argument("--red-frequencies", type=int, default=30, metavar="N",
                   help="Fourier frequencies of the injected red noise (default 30)")
    p.add_argument("--red-corner-per-yr", type=float, default=0.0, metavar="F",
                   help="corner frequency of the injected red noise, 1/yr (default 0: none)")
    p.add_argument("-o", "--output", required=True, metavar="TOAS")
    p.set_defaults(func=cmd_simulate)

    p = sub.add_parser("demo", help="fit the built-in sample sources")
    p.add_argument("-o", "--outdir", default="timingkit-demo")
    p.set_defaults(func=cmd_demo)

    for name, module, adder in EXTRA_COMMANDS:
        try:
            mod = __import__(module, fromlist=[adder])
        except ImportError:
            continue
        getattr(mod, adder)(sub)
    return parser


# (command name, module, function adding the subparser)
EXTRA_COMMANDS = [
    ("glitches", "timingkit.cli.glitches", "add_glitches_parser"),
    ("batch", "timingkit.batch.runner", "add_batch_parser"),
    ("convert", "timingkit.cli.convert", "add_convert_parser"),
]


def _progress_enabled() -> bool:
    return sys.stderr.isatty()


def cmd_fit(args) -> int:
    from timingkit.pipeline.fit_run import fit_files
    from timingkit.outputs.report import summary_text
    if args.glitch_candidate and not args.suggest:
        raise InputError("--glitch-candidate needs --suggest", field="--glitch-candidate")
    if not 0.0 < args.suggest_level < 1.0:
        raise InputError(f"--suggest-level must lie between 0 and 1, found {args.suggest_level}",
                         field="--suggest-level")
    report = fit_files(args.toas, args.model, args.outdir, free=args.free, fix=args.fix,
                       sites_paths=args.sites, ephemeris=args.ephemeris, clock_paths=args.clock,
                       make_plots=not args.no_plot, color_by=args.color_by,
                       progress=_progress_enabled(), suggest=args.suggest,
                       suggest_level=args.suggest_level,
                       glitch_epochs_mjd=args.glitch_candidate)
    print(summary_text(report))
    spectrum = "" if args.no_plot or "red_noise" not in report.get("noise", {}) else \
        "power_spectrum.png, "
    print(f"\nwrote {args.outdir}/: fitted.toml, residuals.csv, "
          f"{'' if args.no_plot else 'residuals.png, '}{spectrum}report.json")
    return 0


def cmd_residuals(args) -> int:
    from timingkit.pipeline.fit_run import residual_files
    stats = residual_files(args.toas, args.model, args.outdir, sites_paths=args.sites,
                           ephemeris=args.ephemeris, clock_paths=args.clock,
                           color_by=args.color_by)
    print(f"{stats['source']}: {stats['toas']} TOAs, rms {stats['rms_us']:.4g} µs, weighted rms "
          f"{stats['weighted_rms_us']:.4g} µs, reduced chi2 {stats['reduced_chi2']:.3f} (no fit)")
    for w in stats["warnings"]:
        print(f"warning: {w}")
    print(f"wrote {args.outdir}/: residuals.csv, residuals.png, report.json")
    return 0


def cmd_barycenter(args) -> int:
    from timingkit.pipeline.fit_run import barycenter_files
    text = barycenter_files(args.toas, args.model, args.output, sites_paths=args.sites,
                            ephemeris=args.ephemeris, clock_paths=args.clock)
    if args.output is None:
        sys.stdout.write(text)
    else:
        print(f"wrote {args.output}", file=sys.stderr)
    return 0


def cmd_plot(args) -> int:
    from timingkit.outputs.plotting import plot_residuals
    from timingkit.outputs.residual_table import ResidualTable
    post_path = os.path.join(args.outdir, "residuals.csv")
    if not os.path.exists(post_path):
        raise InputError("no residuals.csv here: give a folder written by 'timingkit fit'",
                         path=args.outdir)
    post = ResidualTable.read_csv(post_path)
    pre_path = os.path.join(args.outdir, "prefit_residuals.csv")
    pre = ResidualTable.read_csv(pre_path) if os.path.exists(pre_path) else None
    freq = None
    report_path = os.path.join(args.outdir, "report.json")
    title = None
    if os.path.exists(report_path):
        with open(report_path) as fh:
            rep = json.load(fh)
        title = rep.get("source")
        try:
            freq = float(rep["parameters"]["spin.frequency_hz"]["value"])
        except (KeyError, TypeError, ValueError):
            freq = None
    out = args.output or os.path.join(args.outdir, "residuals.png")
    plot_residuals(post, prefit=pre, color_by=args.color_by, title=title, frequency_hz=freq,
                   path=out)
    print(f"wrote {out}")
    return 0


def cmd_derive(args) -> int:
    from timingkit.pipeline.fit_run import load_model
    from timingkit.outputs.report import derived_for, write_json  # noqa: F401
    from timingkit.physics import spin as derived_mod
    model = load_model(args.model)
    d = derived_for(model)
    if args.json:
        from timingkit.outputs.report import _clean
        print(json.dumps(_clean({"source": model.name, "derived": d,
                                 "assumptions": derived_mod.ASSUMPTIONS,
                                 "cautions": derived_mod.cautions_for(d)}), indent=2))
        return 0
    print(f"{model.name}: derived from the spin parameters")
    for key, q in d.items():
        if q["value"] is None:
            print(f"  {key:36s} —  ({q.get('note') or 'not available'})")
        else:
            unc = "" if q["uncertainty"] is None else f" ± {q['uncertainty']:.3g}"
            print(f"  {key:36s} {q['value']:.6g}{unc} {q['unit']}")
    print(f"  assumptions: {derived_mod.ASSUMPTIONS}")
    for c in derived_mod.cautions_for(d):
        if c != derived_mod.ASSUMPTIONS:
            print(f"  caution: {c}")
    return 0


def cmd_simulate(args) -> int:
    from timingkit.pipeline.fit_run import load_context, load_model, reference_observations
    from timingkit.model.simulate import simulate_toas
    from timingkit.formats.toa_table import write_toas
    model = load_model(args.model)
    sites, eph, clocks = load_context(model, args.sites, args.ephemeris)
    flags = {}
    for item in args.flag:
        name, sep, values = item.partition("=")
        if not sep or not name or not values:
            raise InputError(f"expected NAME=V1,V2, found {item!r}", field="--flag")
        flags[name] = values.split(",")
    noise = _simulated_noise(model, args)
    toas = simulate_toas(model, args.start, args.end, args.count, args.error_us, sites, eph,
                         site_names=args.site, freqs_mhz=args.freq_mhz, seed=args.seed,
                         clocks=clocks, flags=flags, add_noise=not args.no_noise,
                         reference=reference_observations(model, sites, eph, clocks),
                         noise=noise)
    write_toas(toas, args.output)
    print(f"wrote {len(toas)} TOAs to {args.output}")
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


def cmd_demo(args) -> int:
    from timingkit.cli.demo import run_demo
    return run_demo(args.outdir)


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except (InputError, FitError) as exc:
        if args.debug:
            raise
        print(f"timingkit: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("timingkit: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # internal failure: say so, briefly
        if args.debug:
            raise
        print(f"timingkit: internal error: {type(exc).__name__}: {exc} "
              "(run with --debug for the traceback)", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
