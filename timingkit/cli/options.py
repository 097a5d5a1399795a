"""Options shared by several subcommands."""

from __future__ import annotations

import argparse
import contextlib

from timingkit.formats.errors import InputError, excerpt


def comma_list(text: str) -> list[str]:
    """An option value that is a comma-separated list (``a,b,c``)."""
    items = [item.strip() for item in text.split(",")]
    if not all(items):
        raise argparse.ArgumentTypeError(f"expected names separated by commas, found {text!r}")
    return items


def number_list(kind):
    """A comma-separated list of numbers checked by ``kind`` (a function of one text)."""
    def parse(text: str) -> list:
        return [kind(item) for item in comma_list(text)]
    parse.__name__ = getattr(kind, "__name__", "number")
    return parse


def add_free_fix_options(p: argparse.ArgumentParser, free_help: str, fix_help: str) -> None:
    """--free and --fix: one value each, a comma list, and repeatable, so they never
    take the positional arguments that follow them."""
    p.add_argument("--free", action="extend", type=comma_list, default=[], metavar="P[,P...]",
                   help=f"{free_help}: a comma list and/or repeated, e.g. --free "
                        "spin.frequency_hz,dispersion.dm --free position.ra")
    p.add_argument("--fix", action="extend", type=comma_list, default=[], metavar="P[,P...]",
                   help=f"{fix_help}: a comma list and/or repeated, like --free")


def add_input_options(p: argparse.ArgumentParser) -> None:
    """TOAS and MODEL, plus the files a model may need besides its own settings."""
    p.add_argument("toas", help="TOA table (plain text)")
    p.add_argument("model", help="timing model (TOML)")
    add_context_options(p)


def add_context_options(p: argparse.ArgumentParser) -> None:
    """--sites, --ephemeris and --clock: files a model may need besides its settings."""
    add_sites_and_ephemeris_options(p)
    p.add_argument("--clock", action="append", default=[], metavar="FILE",
                   help="clock-correction table; may be repeated")


def add_sites_and_ephemeris_options(p: argparse.ArgumentParser) -> None:
    """--sites and --ephemeris (the simulations, which apply no clock corrections)."""
    p.add_argument("--sites", action="append", default=[], metavar="FILE",
                   help="extra site file (TOML); may be repeated")
    p.add_argument("--ephemeris", metavar="BSP",
                   help="JPL SPK ephemeris file (default: the model's settings, else built-in DE421)")


def add_color_option(p: argparse.ArgumentParser) -> None:
    """--color-by: the TOA-table column that colours the residual figures."""
    p.add_argument("--color-by", default="site", metavar="COLUMN",
                   help="colour the residuals by this column of the TOA table: site, freq "
                        "(one colour per observing band) or a flag such as backend "
                        "(default site)")


def add_wait_option(p: argparse.ArgumentParser, what: str = "the output") -> None:
    """--wait: queue behind another run that holds the output's lock (outputs.folder_lock)."""
    p.add_argument("--wait", action="store_true",
                   help=f"when another timingkit run is writing {what}, wait for it to finish "
                        "instead of refusing (exit 2)")


def wrote_folder_line(outdir: str) -> str:
    """``wrote OUTDIR/: NAME, ...``: every file the folder now holds (hidden ones, such
    as the output marker, left out), so the line never lists less than was written."""
    import os
    names = sorted(name for name in os.listdir(outdir) if not name.startswith("."))
    return f"wrote {outdir.rstrip(os.sep) or os.sep}/: {', '.join(names)}"


@contextlib.contextmanager
def writing_output_file(path: str, field: str = "--output"):
    """For the block that writes the output file ``path``: hold its lock (its folder is
    made if missing, and removed again if left empty), and make a failure to write it
    (missing permission, full disk) the usual 'cannot write the output' InputError."""
    from timingkit.formats.atomic_file import writing_error
    from timingkit.outputs.folder_lock import lock_output
    with lock_output(path, field=field):
        try:
            yield
        except OSError as exc:
            raise writing_error(exc, path) from None


EXIT_NOT_CONVERGED = 4     # outputs written, every one marked as not converged


def converged_status(report: dict) -> int:
    """Exit status of a command that wrote a fit: 0, or EXIT_NOT_CONVERGED."""
    return 0 if report.get("converged", True) else EXIT_NOT_CONVERGED


# Python argument names (the library's error fields) and the options that set them
OPTION_OF_ARGUMENT = {"free": "--free", "flags": "--flag", "fix": "--fix", "window_toas": "--window-toas",
                      "window_days": "--window-days", "window_toas/window_days":
                      "--window-toas/--window-days", "min_significance": "--min-significance",
                      "known_epochs_mjd": "--known-epochs", "null_trials": "--null-trials",
                      "cluster": "--cluster", "error_us": "--error-us",
                      "freqs_mhz": "--freq-mhz", "end_mjd": "--end", "rate_per_s": "--rate-per-s",
                      "pulsed_fraction": "--pulsed-fraction", "span_days": "--span-days",
                      "template": "--template", "profile": "--profile",
                      "energy_range": "--energy-range", "energy_column": "--energy-column",
                      "orbit": "--orbit", "harmonics": "--harmonics", "bins": "--bins",
                      "min_events": "--min-events", "color_by": "--color-by"}


def name_options(exc) -> None:
    """An error about an argument (no file) names the command-line option."""
    if getattr(exc, "path", None) is None and getattr(exc, "field", None) in OPTION_OF_ARGUMENT:
        exc.field = OPTION_OF_ARGUMENT[exc.field]


def progress_enabled() -> bool:
    """Progress bars only on a terminal."""
    import sys
    return sys.stderr.isatty()


def add_selection_options(p: argparse.ArgumentParser) -> None:
    """--exclude, --select, --leave-out: TOAs to leave out of the fit (README,
    "Leaving TOAs out"). Each may be repeated; --exclude also takes a comma list."""
    p.add_argument("--exclude", action="append", default=[], metavar="FILE",
                   help="exclusion list: TOAs (by line and MJD) and rules to leave out; may be "
                        "repeated or given as a comma list")
    p.add_argument("--select", action="append", default=[], metavar="RULE",
                   help="fit only the TOAs this rule matches, e.g. mjd=58000..58500, "
                        "site=desert-dish,lake-array, backend=wide-a, 'err_us<5'; may be "
                        "repeated (rules on one field: any may match; on different fields: "
                        "all must)")
    p.add_argument("--leave-out", action="append", default=[], metavar="RULE",
                   help="leave out the TOAs this rule matches (same rules as --select, e.g. "
                        "'err_us>5', mjd=58900..58950); may be repeated")


def left_out_line(report: dict) -> str | None:
    """One line on the TOAs left out of a fit, or None when there are none."""
    if not report.get("excluded_toas"):
        return None
    counts: dict[str, int] = {}
    for group in report.get("excluded", []):
        counts[group["reason"]] = counts.get(group["reason"], 0) + len(group["lines"])
    reasons = "; ".join(f"{reason}: {n}" for reason, n in counts.items())
    return (f"  left out of the fit: {report['excluded_toas']} TOAs ({reasons}); residuals.csv "
            "still lists them, marked in its column left_out")


def selection_arguments(args) -> dict:
    """The keyword arguments of the pipeline functions for the options above."""
    files = [path for item in args.exclude for path in item.split(",") if path]
    return {"exclude_paths": files, "select": list(args.select),
            "leave_out": list(args.leave_out)}


def parse_flag_options(texts: list[str]) -> dict[str, str]:
    """``--flag NAME=VALUE`` options as a dict (a name given twice is an error)."""
    flags: dict[str, str] = {}
    for text in texts:
        name, sep, value = text.partition("=")
        if not sep or not name.strip() or not value.strip():
            raise InputError(f"expected NAME=VALUE, found {excerpt(text)}", field="--flag",
                             quoted=(text,))
        if name.strip() in flags:
            raise InputError(f"flag {excerpt(name.strip())} given twice", field="--flag",
                             quoted=(name.strip(),))
        flags[name.strip()] = value.strip()
    return flags
