"""``timingkit glitches``: search TOAs for glitches, fit them, write the results.

Outputs in OUTDIR: ``glitches.json`` (candidates with their brackets,
steps, uncertainties and false-alarm probabilities), ``fitted.toml`` (the
starting model with the glitches added and everything fitted),
``glitch_search.png`` (residuals before the glitch terms, the local
frequency track with the candidate epochs, the frequency-derivative track),
with ``--explore`` ``explorer.html`` (the candidates marked), and the files
of ``timingkit fit`` (residuals.csv, prefit_residuals.csv, residuals.png,
report.json with ``glitch_candidates``). :func:`glitch_files`
takes the same arguments as :func:`timingkit.pipeline.fit_run.fit_files`, so the
batch runner can use it as its fit function.
"""

from __future__ import annotations

import argparse
import os

from timingkit.cli.options import (
    add_color_option,
    add_wait_option,
    add_free_fix_options,
    add_selection_options,
    converged_status,
    left_out_line,
    number_list,
    selection_arguments,
    wrote_folder_line,
)
from timingkit.glitch.results import DEFAULT_MIN_SIGNIFICANCE, DEFAULT_NULL_TRIALS, GlitchSearchSettings
from timingkit.pipeline.glitch_run import GLITCH_FILE, glitch_files


def _mjd(text: str) -> str:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected an MJD, found {text!r}") from None
    if not 0 < value < 200000:
        raise argparse.ArgumentTypeError(f"expected an MJD (0-200000), found {text!r}")
    return text


def add_parsers(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "glitches", help="search TOAs for glitches, fit them, plot and report",
        description="Track the spin frequency in sliding windows, find change points with "
                    "false-alarm probabilities from simulated noise (white, or the model's "
                    "[[white_noise]]/[red_noise] sections), keep the phase connected across "
                    "glitches, fit each glitch as a [[glitch]] section of the model.")
    p.add_argument("toas", help="TOA table (plain text)")
    p.add_argument("model", help="starting timing model (TOML)")
    p.add_argument("-o", "--outdir", default=None,
                   help="output folder (default: SOURCE-glitches, after the model's name)")
    window = p.add_mutually_exclusive_group()
    window.add_argument("--window-toas", type=int, metavar="N",
                        help="TOAs in the window on each side of a gap (default 10)")
    window.add_argument("--window-days", type=float, metavar="D",
                        help="days in the window on each side of a gap")
    p.add_argument("--min-significance", type=float, default=DEFAULT_MIN_SIGNIFICANCE,
                   metavar="S", help="accept candidates whose global false-alarm probability "
                   f"is below the Gaussian S-sigma two-sided tail (default {DEFAULT_MIN_SIGNIFICANCE})")
    p.add_argument("--known-epochs", action="extend", type=number_list(_mjd),
                   metavar="MJD[,MJD...]",
                   help="test and fit glitches at these epochs (TDB) instead of searching: a "
                        "comma list and/or repeated")
    p.add_argument("--null-trials", type=int, default=DEFAULT_NULL_TRIALS, metavar="N",
                   help=f"noise simulations for the false-alarm probabilities "
                        f"(default {DEFAULT_NULL_TRIALS})")
    p.add_argument("--no-decay", action="store_true",
                   help="do not try decaying frequency steps")
    p.add_argument("--seed", type=int, default=GlitchSearchSettings.seed,
                   help="random seed of the null simulations")
    add_free_fix_options(p, "also fit these", "hold these fixed")
    p.add_argument("--sites", action="append", default=[], metavar="FILE",
                   help="extra site file (TOML); may be repeated")
    p.add_argument("--ephemeris", metavar="BSP", help="JPL SPK ephemeris file")
    p.add_argument("--clock", action="append", default=[], metavar="FILE",
                   help="clock-correction table; may be repeated")
    add_color_option(p)
    p.add_argument("--no-plot", action="store_true", help="skip the figures")
    p.add_argument("--explore", action="store_true",
                   help="also write explorer.html, the interactive residual explorer, with "
                        "the candidates and the fitted glitches marked")
    add_selection_options(p)
    add_wait_option(p)
    p.set_defaults(func=cmd_glitches)
    return p


def cmd_glitches(args) -> int:
    from timingkit.cli.fit import default_outdir
    default_outdir(args, "glitches")
    settings = GlitchSearchSettings(
        window_toas=args.window_toas, window_days=args.window_days,
        min_significance=args.min_significance, known_epochs_mjd=args.known_epochs,
        null_trials=args.null_trials, fit_decays=not args.no_decay, seed=args.seed)
    report = glitch_files(args.toas, args.model, args.outdir, free=args.free, fix=args.fix,
                          sites_paths=args.sites, ephemeris=args.ephemeris,
                          clock_paths=args.clock, make_plots=not args.no_plot,
                          color_by=args.color_by, settings=settings,
                          **selection_arguments(args))
    if args.explore:
        from timingkit.outputs.explorer_page import write_explorer
        write_explorer(args.outdir)
    print(summary_text(report, os.path.join(args.outdir, GLITCH_FILE)))
    if left_out_line(report):
        print(left_out_line(report))
    print(wrote_folder_line(args.outdir))
    return converged_status(report)


def summary_text(report: dict, glitch_path: str) -> str:
    import json
    with open(glitch_path, encoding="utf-8") as fh:
        found = json.load(fh)
    n = len(found["candidates"])
    lines = [f"{report['source']}: {report['toas']} TOAs, {n} glitch candidate"
             f"{'' if n == 1 else 's'}; fitted model reduced chi2 {report['reduced_chi2']:.3f}, "
             f"weighted rms {report['weighted_rms_us']:.4g} µs"
             + ("" if report.get("converged", True) else " (fit NOT CONVERGED)")]
    from timingkit.outputs.numbers import format_quantity, format_value
    for c in found["candidates"]:
        fap = c["false_alarm_probability"]
        lines.append(
            f"  MJD {format_value(c['epoch_mjd'], c['epoch_uncertainty_days'])} (between "
            f"{c['epoch_min_mjd']:.4f} and {c['epoch_max_mjd']:.4f}): step "
            + format_quantity(c["frequency_step_hz"], c["frequency_step_uncertainty_hz"], "Hz")
            + f" (fractional {c['fractional_size']:.3g}), frequency-derivative step "
            + format_quantity(c["frequency_derivative_step"],
                              c["frequency_derivative_step_uncertainty"], "Hz/s")
            + ", false-alarm probability "
            + _fap_text(fap, c.get("false_alarm_probability_upper_limit"),
                        found["settings"]["null_trials"]))
        if not c.get("decaying_terms"):
            lines.append("    no significant decaying step (tried on time-scales "
                         + ", ".join(f"{d:g}" for d in found["settings"]["decay_grid_days"])
                         + " days)" if c.get("decaying_term_tried") else
                         "    decaying steps not tried")
        for d in c.get("decaying_terms", []):
            lines.append("    decaying step "
                         + format_quantity(d["decaying_frequency_step_hz"],
                                           d["decaying_frequency_step_uncertainty_hz"], "Hz")
                         + ", time-scale "
                         + format_quantity(d["decay_time_days"],
                                           d["decay_time_uncertainty_days"], "days"))
    limit = found.get("detection_limit") or {}
    if limit.get("fractional_size") is not None:
        lines.append(f"  detection limit (95 %, typical gap): fractional size "
                     f"{limit['fractional_size']:.2g}")
    if n:
        lines.append(f"  note: {found.get('assumptions', '')}")
    from timingkit.fit.least_squares import LOUD_WARNINGS
    for w in report.get("warnings", []):
        lines.append(f"{'WARNING' if w.startswith(LOUD_WARNINGS) else 'warning'}: {w}")
    return "\n".join(lines)


def _fap_text(fap, upper: bool, trials: int) -> str:
    if fap is None:
        return "n/a"
    if upper:
        return f"< {fap:.2g} (none of {trials} noise simulations reached it)"
    return f"{fap:.2g}"
