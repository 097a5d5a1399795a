"""``timingkit fit``, ``residuals``, ``barycentre`` and ``plot``: one source's TOAs
against its model."""

from __future__ import annotations

import contextlib
import json
import os
import sys

from timingkit.cli.options import (
    add_color_option,
    add_wait_option,
    EXIT_NOT_CONVERGED,
    add_free_fix_options,
    add_input_options,
    add_selection_options,
    converged_status,
    left_out_line,
    progress_enabled,
    selection_arguments,
    wrote_folder_line,
    writing_output_file,
)
from timingkit.formats.errors import InputError
from timingkit.formats.atomic_file import refuse_output_over_inputs


def add_parsers(sub) -> None:
    p = sub.add_parser("fit", help="fit a timing model to TOAs")
    add_input_options(p)
    p.add_argument("-o", "--outdir", default=None,
                   help="output folder (default: SOURCE-fit, after the model's name)")
    add_free_fix_options(p, "parameters to fit besides the model's [fit] free",
                         "parameters to hold fixed")
    add_color_option(p)
    p.add_argument("--no-plot", action="store_true", help="skip residuals.png")
    p.add_argument("--suggest", action="store_true",
                   help="also try, one at a time, the next spin-frequency and DM derivatives, "
                        "the fixed astrometric and binary terms and glitches at "
                        "--glitch-candidate epochs; list those the data support (F-test, "
                        "delta AIC/BIC)")
    p.add_argument("--suggest-level", type=float, default=0.01, metavar="P",
                   help="F-test probability below which an addition is supported (default 0.01)")
    p.add_argument("--max-iterations", type=int, default=20, metavar="N",
                   help="linearised fit iterations before giving up (default 20); a fit that "
                        f"has not converged by then exits with status {EXIT_NOT_CONVERGED}")
    p.add_argument("--glitch-candidate", action="append", default=[], metavar="MJD",
                   help="with --suggest: also try a glitch at this epoch; may be repeated")
    add_selection_options(p)
    p.add_argument("--explore", action="store_true",
                   help="also write explorer.html, the interactive residual explorer")
    add_wait_option(p)
    p.set_defaults(func=cmd_fit)

    p = sub.add_parser("residuals", help="residuals of a model without fitting")
    add_input_options(p)
    p.add_argument("-o", "--outdir", default=None,
                   help="output folder (default: SOURCE-residuals, after the model's name)")
    add_color_option(p)
    add_selection_options(p)
    add_wait_option(p)
    p.set_defaults(func=cmd_residuals)

    p = sub.add_parser("barycentre", aliases=["barycenter"],
                       help="per-TOA time scales and delays as CSV")
    add_input_options(p)
    p.add_argument("-o", "--output", metavar="CSV", help="output CSV (default: standard output)")
    add_wait_option(p, "the CSV file")
    p.set_defaults(func=cmd_barycentre)

    p = sub.add_parser("plot", help="plot residuals from a fit output folder")
    p.add_argument("outdir", help="folder written by 'fit' or 'residuals'")
    add_color_option(p)
    p.add_argument("-o", "--output", metavar="PNG", help="figure file (.png or .pdf)")
    add_wait_option(p, "into OUTDIR")
    p.set_defaults(func=cmd_plot)


def default_outdir(args, command: str, fallback: str | None = None) -> str:
    """``-o`` as given, else SOURCE-COMMAND after the model's name (or the name of
    ``fallback``, default the TOA file)."""
    if args.outdir is not None:
        return args.outdir
    from timingkit.formats.model_file import read_model_document
    from timingkit.outputs.output_set import default_output_folder
    name = read_model_document(args.model).data.get("name")
    args.outdir = default_output_folder(name if isinstance(name, str) else None,
                                        fallback or args.toas, command)
    return args.outdir


def cmd_fit(args) -> int:
    from timingkit.pipeline.fit_run import fit_files
    from timingkit.outputs.report import summary_text
    default_outdir(args, "fit")
    if args.glitch_candidate and not args.suggest:
        raise InputError("--glitch-candidate needs --suggest", field="--glitch-candidate")
    if args.max_iterations < 1:
        raise InputError(f"--max-iterations must be at least 1, found {args.max_iterations}",
                         field="--max-iterations")
    if not 0.0 < args.suggest_level < 1.0:
        raise InputError(f"--suggest-level must lie between 0 and 1, found {args.suggest_level}",
                         field="--suggest-level")
    report = fit_files(args.toas, args.model, args.outdir, free=args.free, fix=args.fix,
                       sites_paths=args.sites, ephemeris=args.ephemeris, clock_paths=args.clock,
                       make_plots=not args.no_plot, color_by=args.color_by,
                       progress=progress_enabled(), suggest=args.suggest,
                       suggest_level=args.suggest_level,
                       glitch_epochs_mjd=args.glitch_candidate,
                       max_iterations=args.max_iterations, **selection_arguments(args))
    print(summary_text(report))
    if left_out_line(report):
        print(left_out_line(report))
    if args.explore:
        from timingkit.outputs.explorer_page import write_explorer
        write_explorer(args.outdir)
    print("\n" + wrote_folder_line(args.outdir))
    return converged_status(report)


def cmd_residuals(args) -> int:
    from timingkit.pipeline.fit_run import residual_files
    default_outdir(args, "residuals")
    stats = residual_files(args.toas, args.model, args.outdir, sites_paths=args.sites,
                           ephemeris=args.ephemeris, clock_paths=args.clock,
                           color_by=args.color_by, **selection_arguments(args))
    print(f"{stats['source']}: {stats['toas']} TOAs, rms {stats['rms_us']:.4g} µs, weighted rms "
          f"{stats['weighted_rms_us']:.4g} µs, reduced chi2 {stats['reduced_chi2']:.3f} (no fit)"
          + (f"; {stats['excluded_toas']} left out" if stats["excluded_toas"] else ""))
    from timingkit.fit.least_squares import LOUD_WARNINGS
    for w in stats["warnings"]:
        print(f"{'WARNING' if w.startswith(LOUD_WARNINGS) else 'warning'}: {w}")
    print(wrote_folder_line(args.outdir))
    return 0


def cmd_barycentre(args) -> int:
    from timingkit.pipeline.barycentre import barycentre_files
    text = barycentre_files(args.toas, args.model, args.output, sites_paths=args.sites,
                            ephemeris=args.ephemeris, clock_paths=args.clock)
    if args.output is None:
        sys.stdout.write(text)
    else:
        print(f"wrote {args.output}", file=sys.stderr)
    return 0


def cmd_plot(args) -> int:
    from timingkit.outputs.folder_lock import lock_output
    post_path = os.path.join(args.outdir, "residuals.csv")
    if not os.path.exists(post_path):
        raise InputError("no residuals.csv here: give a folder written by 'timingkit fit'",
                         path=args.outdir)
    elsewhere = args.output is not None and os.path.dirname(os.path.abspath(args.output)) != \
        os.path.abspath(args.outdir)
    with lock_output(args.outdir):      # no run replaces the folder while it is read
        with writing_output_file(args.output) if elsewhere else contextlib.nullcontext():
            out = _plot_folder(args, post_path)
    print(f"wrote {out}")
    return 0


def _plot_folder(args, post_path: str) -> str:
    from timingkit.outputs.plotting import plot_residuals
    from timingkit.outputs.residual_table import ResidualTable
    post = ResidualTable.read_csv(post_path)
    pre_path = os.path.join(args.outdir, "prefit_residuals.csv")
    pre = ResidualTable.read_csv(pre_path) if os.path.exists(pre_path) else None
    title, freq = _report_title_and_frequency(os.path.join(args.outdir, "report.json"))
    out = args.output or os.path.join(args.outdir, "residuals.png")
    refuse_output_over_inputs(out, [post_path, pre_path, os.path.join(args.outdir, "report.json")])
    from timingkit.pipeline.glitch_run import GLITCH_FILE, STARTING_LABEL
    searched = os.path.exists(os.path.join(args.outdir, GLITCH_FILE))
    plot_residuals(post, prefit=pre, color_by=args.color_by, title=title, frequency_hz=freq,
                   glitch_epochs_mjd=_fitted_glitch_epochs(args.outdir), path=out,
                   prefit_label=STARTING_LABEL if searched else "pre-fit")
    return out


def _fitted_glitch_epochs(outdir: str) -> list[float]:
    """Glitch epochs (MJD) of the folder's fitted.toml, for marking them; none if absent."""
    import tomllib
    try:
        with open(os.path.join(outdir, "fitted.toml"), "rb") as fh:
            glitches = tomllib.load(fh).get("glitch", [])
        return [float(g["epoch_mjd"]) for g in glitches]
    except (OSError, ValueError, KeyError, TypeError):
        return []


def _report_title_and_frequency(report_path: str):
    """(figure title, spin frequency in Hz) from a fit's report.json, or Nones when
    there is none: the title the fit gave the figure (source, TOAs, a fit that did not
    converge marked); a corrupt report is bad input."""
    if not os.path.exists(report_path):
        return None, None
    from timingkit.formats.textfile import read_text_file
    try:
        report = json.loads(read_text_file(report_path, "fit report (JSON)"))
    except ValueError as exc:
        raise InputError(f"not a valid report.json ({exc.__class__.__name__}); rerun the fit",
                         path=report_path, line=getattr(exc, "lineno", None)) from None
    if not isinstance(report, dict):
        raise InputError("not a valid report.json (not a JSON object); rerun the fit",
                         path=report_path)
    title = report.get("source")
    try:
        freq = float(report["parameters"]["spin.frequency_hz"]["value"])
    except (KeyError, TypeError, ValueError):
        freq = None
    if not isinstance(title, str):
        return None, freq
    if isinstance(report.get("toas"), int):                 # the title the fit gave it
        title += f": {report['toas']} TOAs"
    if report.get("converged") is False:
        from timingkit.pipeline.fit_run import NOT_CONVERGED_MARK
        title += f" ({NOT_CONVERGED_MARK})"
    return title, freq
